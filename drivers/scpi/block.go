package scpi

import (
	"bytes"
	"errors"
	"fmt"
)

// ErrShortBlock means the bytes given end before the block does; read more.
var ErrShortBlock = errors.New("block incomplete")

// MaxBlock is the largest definite-length block accepted (16 MiB): a longer
// length field is treated as a garbled reply, not as a request to buffer it.
const MaxBlock = 16 << 20

// ParseBlock parses an IEEE 488.2 arbitrary block at the start of b:
// definite length "#<n><n digits: length><data>" (n = 1..9), or indefinite
// length "#0<data>" ended by term (the read terminator, standing in for the
// END message a serial line does not have). It returns the data and the bytes
// after the block (for a definite block, any terminator that follows is
// left in rest). When b ends before the block does it returns ErrShortBlock;
// a malformed header is a *ParseError.
func ParseBlock(b []byte, term string) (data, rest []byte, err error) {
	if len(b) == 0 {
		return nil, nil, ErrShortBlock
	}
	if b[0] != '#' {
		return nil, nil, &ParseError{Reply: string(b), Want: "a block starting with #"}
	}
	if len(b) < 2 {
		return nil, nil, ErrShortBlock
	}
	n := int(b[1] - '0')
	if b[1] < '0' || b[1] > '9' {
		return nil, nil, &ParseError{Reply: string(b), Want: "a block header #<digit>"}
	}
	if n == 0 {
		if term == "" {
			return nil, nil, &ParseError{Reply: string(b), Want: "a definite-length block (no terminator to end #0)"}
		}
		i := bytes.Index(b[2:], []byte(term))
		if i < 0 {
			return nil, nil, ErrShortBlock
		}
		return b[2 : 2+i], b[2+i+len(term):], nil
	}
	if len(b) < 2+n {
		return nil, nil, ErrShortBlock
	}
	length := 0
	for _, c := range b[2 : 2+n] {
		if c < '0' || c > '9' {
			return nil, nil, &ParseError{Reply: string(b[:2+n]), Want: fmt.Sprintf("a block header with %d length digits", n)}
		}
		length = length*10 + int(c-'0')
		if length > MaxBlock {
			return nil, nil, &ParseError{Reply: string(b[:2+n]), Want: fmt.Sprintf("a block of at most %d bytes", MaxBlock)}
		}
	}
	start := 2 + n
	if len(b) < start+length {
		return nil, nil, ErrShortBlock
	}
	return b[start : start+length], b[start+length:], nil
}
