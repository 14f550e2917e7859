package scpi

import (
	"bytes"
	"errors"
	"math"
	"strings"
	"testing"
)

// The byte images below are IEEE 754 encodings worked by hand (from
// memory, and checked against encoding/binary in TestDecodeArrayMatchesStdlib):
// 1.0 is 0x3F800000 in binary32 and 0x3FF0000000000000 in binary64;
// -2.5 is 0xC0200000 in binary32.
func TestDecodeArray(t *testing.T) {
	tests := []struct {
		name   string
		data   string
		format string
		n      int
		want   []float64
		errHas string // "" for success
	}{
		{"f32 le", "\x00\x00\x80\x3f\x00\x00\x20\xc0", ArrayFloat32LE, 2, []float64{1, -2.5}, ""},
		{"f32 be", "\x3f\x80\x00\x00\xc0\x20\x00\x00", ArrayFloat32BE, 2, []float64{1, -2.5}, ""},
		{"f64 le", "\x00\x00\x00\x00\x00\x00\xf0\x3f", ArrayFloat64LE, 1, []float64{1}, ""},
		{"f64 be", "\x3f\xf0\x00\x00\x00\x00\x00\x00", ArrayFloat64BE, 1, []float64{1}, ""},
		{"ascii", "1.0,-2.5E+00, +3", ArrayASCII, 3, []float64{1, -2.5, 3}, ""},
		{"ascii empty of none", "", ArrayASCII, 0, []float64{}, ""},
		{"binary empty of none", "", ArrayFloat32LE, 0, []float64{}, ""},
		{"f32 ragged", "\x00\x00\x80\x3f\x00", ArrayFloat32LE, 1, nil, "5 bytes are not a whole number of 4-byte values"},
		{"f64 short", "\x00\x00\x00\x00\x00\x00\xf0\x3f", ArrayFloat64LE, 2, nil, "2 float64-le values (16 bytes): the block holds 1"},
		{"f32 long", "\x00\x00\x80\x3f\x00\x00\x80\x3f", ArrayFloat32LE, 1, nil, "the block holds 2"},
		{"ascii short", "1,2", ArrayASCII, 3, nil, "holds 2 fields"},
		{"ascii empty field", "1,,3", ArrayASCII, 3, nil, "field 2 of 3"},
		{"ascii trailing comma", "1,2,", ArrayASCII, 3, nil, "field 3 of 3"},
		{"ascii garbage", "1,2x,3", ArrayASCII, 3, nil, "field 2 of 3 (\"2x\")"},
		{"ascii hex", "0x10", ArrayASCII, 1, nil, "field 1 of 1"},
		{"ascii empty", " ", ArrayASCII, 2, nil, "the block is empty"},
		{"unknown format", "", "int16", 0, nil, "want one of ascii"},
		{"negative count", "", ArrayASCII, -1, nil, "must not be negative"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := DecodeArray([]byte(tt.data), tt.format, tt.n)
			if tt.errHas != "" {
				if err == nil || !strings.Contains(err.Error(), tt.errHas) {
					t.Fatalf("got %v, %v; want an error containing %q", got, err, tt.errHas)
				}
				return
			}
			if err != nil || len(got) != len(tt.want) {
				t.Fatalf("got %v, %v; want %v", got, err, tt.want)
			}
			for i := range got {
				if got[i] != tt.want[i] {
					t.Fatalf("value %d: got %v, want %v", i, got[i], tt.want[i])
				}
			}
		})
	}
}

// A whole fetch reply as a profile instrument sends it: header, data and
// terminator, framed by ParseBlock and then decoded; each way a reply can be
// spoiled is a clear error, never values.
func TestBlockThenArray(t *testing.T) {
	vs := []float64{0.5, -0.25, 1e-3}
	data, err := EncodeArray(vs, ArrayFloat32LE)
	if err != nil {
		t.Fatal(err)
	}
	whole := append(Block(data), '\n')
	if string(whole[:4]) != "#212" {
		t.Fatalf("header %q, want #212 (12 bytes, 2 length digits)", whole[:4])
	}
	d, rest, err := ParseBlock(whole, "\n")
	if err != nil || string(rest) != "\n" {
		t.Fatalf("ParseBlock: %v rest %q", err, rest)
	}
	got, err := DecodeArray(d, ArrayFloat32LE, 3)
	if err != nil || got[0] != 0.5 || got[1] != -0.25 || got[2] != float64(float32(1e-3)) {
		t.Fatalf("got %v %v", got, err)
	}
	// Header announcing more bytes than sent: incomplete, read more.
	if _, _, err := ParseBlock(append([]byte("#213"), data...), "\n"); !errors.Is(err, ErrShortBlock) {
		t.Fatalf("long header: %v, want ErrShortBlock", err)
	}
	// Header announcing fewer: the block is 11 bytes, not 3 values.
	d, _, err = ParseBlock(append([]byte("#211"), data...), "\n")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := DecodeArray(d, ArrayFloat32LE, 3); err == nil || !strings.Contains(err.Error(), "11 bytes are not a whole number") {
		t.Fatalf("short length: %v", err)
	}
	// A garbled length digit.
	if _, _, err := ParseBlock(append([]byte("#2x2"), data...), "\n"); err == nil || errors.Is(err, ErrShortBlock) {
		t.Fatalf("garbled length: %v, want a malformed header", err)
	}
}

func TestDecodeArrayMatchesStdlib(t *testing.T) {
	vs := []float64{0, 1, -1, math.Pi, 1e-30, -6.02e23, math.Inf(1)}
	for _, f := range []string{ArrayFloat32LE, ArrayFloat32BE, ArrayFloat64LE, ArrayFloat64BE, ArrayASCII} {
		data, err := EncodeArray(vs, f)
		if err != nil {
			t.Fatal(err)
		}
		got, err := DecodeArray(data, f, len(vs))
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		for i, v := range vs {
			want := v
			switch f {
			case ArrayFloat32LE, ArrayFloat32BE:
				want = float64(float32(v))
			case ArrayASCII:
				want, _ = ParseNumber(strings.Split(string(data), ",")[i])
			}
			if got[i] != want && !(math.IsNaN(got[i]) && math.IsNaN(want)) {
				t.Fatalf("%s value %d: got %v, want %v", f, i, got[i], want)
			}
		}
	}
}

func FuzzDecodeArray(f *testing.F) {
	f.Add([]byte("1,2,3"), uint8(0), 3)
	f.Add([]byte("\x00\x00\x80\x3f"), uint8(1), 1)
	f.Add([]byte("\x00\x00\x00\x00\x00\x00\xf0\x3f"), uint8(3), 1)
	f.Add([]byte(",,"), uint8(0), 3)
	formats := []string{ArrayASCII, ArrayFloat32LE, ArrayFloat32BE, ArrayFloat64LE, ArrayFloat64BE}
	f.Fuzz(func(t *testing.T, data []byte, fi uint8, n int) {
		format := formats[int(fi)%len(formats)]
		if n > 1<<16 {
			n = 1 << 16
		}
		got, err := DecodeArray(data, format, n)
		if err != nil {
			if got != nil {
				t.Fatalf("values %v returned with error %v", got, err)
			}
			return
		}
		if len(got) != n {
			t.Fatalf("%d values returned, %d asked", len(got), n)
		}
		// A binary array decodes to exactly the bytes it came from.
		if size, _ := ElementSize(format); size == 8 {
			back, _ := EncodeArray(got, format)
			if !bytes.Equal(back, data) {
				t.Fatalf("re-encoding %v gave % x, want % x", got, back, data)
			}
		}
	})
}
