package scpi

import (
	"encoding/binary"
	"fmt"
	"math"
	"strings"
)

// Array formats of a block's data, as an instrument profile names them:
// ASCII numbers separated by commas, or IEEE 754 binary numbers of 4 or 8
// bytes in little- or big-endian byte order (IEEE 488.2 leaves the order to
// the instrument; common practice is to say it in the manual).
const (
	ArrayASCII     = "ascii"
	ArrayFloat32LE = "float32-le"
	ArrayFloat32BE = "float32-be"
	ArrayFloat64LE = "float64-le"
	ArrayFloat64BE = "float64-be"
)

// ArrayFormats lists the formats DecodeArray accepts, for error messages.
const ArrayFormats = "ascii, float32-le, float32-be, float64-le, float64-be"

// ElementSize returns the bytes per number of a binary format, 0 for ascii,
// and false for an unknown format.
func ElementSize(format string) (int, bool) {
	switch format {
	case ArrayASCII:
		return 0, true
	case ArrayFloat32LE, ArrayFloat32BE:
		return 4, true
	case ArrayFloat64LE, ArrayFloat64BE:
		return 8, true
	}
	return 0, false
}

// DecodeArray decodes the data of a block (ParseBlock's data, header and
// terminator removed) that must hold exactly n numbers in format. It is
// strict: a binary block whose length is not n whole numbers, an ASCII list
// with an empty or malformed field, or any other count than n is a
// *ParseError naming what was found. Values are returned as decoded: SCPI's
// overflow and not-a-number values come back as ±Inf and NaN (ParseNumber;
// in binary as the IEEE values or ±9.9E37), for the caller to refuse.
func DecodeArray(data []byte, format string, n int) ([]float64, error) {
	size, ok := ElementSize(format)
	if !ok {
		return nil, fmt.Errorf("array format %q: want one of %s", format, ArrayFormats)
	}
	if n < 0 {
		return nil, fmt.Errorf("array of %d values: the count must not be negative", n)
	}
	if size == 0 {
		return decodeASCII(data, n)
	}
	if len(data)%size != 0 {
		return nil, &ParseError{Reply: blockHead(data), Want: fmt.Sprintf("%s data: %d bytes are not a whole number of %d-byte values", format, len(data), size)}
	}
	if got := len(data) / size; got != n {
		return nil, &ParseError{Reply: blockHead(data), Want: fmt.Sprintf("%d %s values (%d bytes): the block holds %d", n, format, n*size, got)}
	}
	order := binary.ByteOrder(binary.LittleEndian)
	if strings.HasSuffix(format, "-be") {
		order = binary.BigEndian
	}
	out := make([]float64, n)
	for i := range out {
		b := data[i*size : (i+1)*size]
		if size == 4 {
			out[i] = float64(math.Float32frombits(order.Uint32(b)))
		} else {
			out[i] = math.Float64frombits(order.Uint64(b))
		}
	}
	return out, nil
}

func decodeASCII(data []byte, n int) ([]float64, error) {
	s := string(data)
	if strings.TrimSpace(s) == "" {
		if n == 0 {
			return []float64{}, nil
		}
		return nil, &ParseError{Reply: clip(s), Want: fmt.Sprintf("%d comma-separated numbers: the block is empty", n)}
	}
	fields := strings.Split(s, ",")
	if len(fields) != n {
		return nil, &ParseError{Reply: clip(s), Want: fmt.Sprintf("%d comma-separated numbers: the block holds %d fields", n, len(fields))}
	}
	out := make([]float64, n)
	for i, f := range fields {
		v, err := ParseNumber(f)
		if err != nil {
			return nil, &ParseError{Reply: clip(s), Want: fmt.Sprintf("comma-separated numbers: field %d of %d (%q) is not a number (NR1, NR2 or NR3)", i+1, n, clip(f))}
		}
		out[i] = v
	}
	return out, nil
}

// blockHead renders the first bytes of binary data for an error message.
func blockHead(data []byte) string {
	const show = 16
	if len(data) > show {
		return fmt.Sprintf("% x ... (%d bytes)", data[:show], len(data))
	}
	return fmt.Sprintf("% x (%d bytes)", data, len(data))
}

// EncodeArray renders values as the data of a block in format (the inverse
// of DecodeArray; ascii uses NR3 with 7 significant digits), for instruments
// simulated by this project and for tests.
func EncodeArray(vs []float64, format string) ([]byte, error) {
	size, ok := ElementSize(format)
	if !ok {
		return nil, fmt.Errorf("array format %q: want one of %s", format, ArrayFormats)
	}
	if size == 0 {
		parts := make([]string, len(vs))
		for i, v := range vs {
			parts[i] = fmt.Sprintf("%.6E", v)
		}
		return []byte(strings.Join(parts, ",")), nil
	}
	order := binary.AppendByteOrder(binary.LittleEndian)
	if strings.HasSuffix(format, "-be") {
		order = binary.BigEndian
	}
	out := make([]byte, 0, len(vs)*size)
	for _, v := range vs {
		if size == 4 {
			out = order.AppendUint32(out, math.Float32bits(float32(v)))
		} else {
			out = order.AppendUint64(out, math.Float64bits(v))
		}
	}
	return out, nil
}

// Block frames data as a definite-length arbitrary block (IEEE 488.2
// "#<n><length><data>").
func Block(data []byte) []byte {
	l := fmt.Sprint(len(data))
	return append([]byte(fmt.Sprintf("#%d%s", len(l), l)), data...)
}
