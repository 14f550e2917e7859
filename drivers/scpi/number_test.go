package scpi

import (
	"errors"
	"math"
	"strconv"
	"testing"
)

// The numeric forms are those of IEEE 488.2 §8.7 (NR1 integer, NR2 fixed
// point, NR3 with exponent; from memory of the standard's definitions). The
// special values 9.9E37 (+infinity), -9.9E37 and 9.91E37 (NaN) are SCPI-1999
// Vol. 1 §7.2.1 (from memory; common practice across SCPI instruments).
func TestParseNumber(t *testing.T) {
	inf, ninf, nan := math.Inf(1), math.Inf(-1), math.NaN()
	tests := []struct {
		in   string
		want float64
		bad  bool
	}{
		{"42", 42, false},                   // NR1
		{"+42", 42, false},                  // NR1 with sign
		{"-7", -7, false},                   // NR1 negative
		{"3.25", 3.25, false},               // NR2
		{"-0.5", -0.5, false},               // NR2
		{".5", 0.5, false},                  // NR2 without leading digit
		{"5.", 5, false},                    // NR2 without fraction digits
		{"1.234560E-03", 1.23456e-3, false}, // NR3
		{"+1.5e+2", 150, false},             // NR3, lower-case e
		{"-2E3", -2000, false},              // NR3 without point
		{"  +1.0E+00 ", 1, false},           // blanks around
		{"9.9E37", inf, false},              // overflow
		{"9.90000E+37", inf, false},         // overflow, other spelling
		{"+9.9E+37", inf, false},
		{"-9.9E37", ninf, false},
		{"9.91E37", nan, false}, // not a number
		{"9.910E+37", nan, false},
		{"INF", inf, false},
		{"-inf", ninf, false},
		{"NAN", nan, false},
		{"9.8E37", 9.8e37, false}, // a large finite value is not special
		{"", 0, true},
		{"+", 0, true},
		{"E5", 0, true},
		{"1E", 0, true},
		{"1.2.3", 0, true},
		{"0x1p3", 0, true},
		{"1_000", 0, true},
		{"Infinity", 0, true},
		{"1.5 V", 0, true},
		{"1e999", 0, true},
		{"12,3", 0, true},
	}
	for _, tt := range tests {
		t.Run(tt.in, func(t *testing.T) {
			got, err := ParseNumber(tt.in)
			if tt.bad {
				var pe *ParseError
				if !errors.As(err, &pe) || pe.Reply != tt.in {
					t.Fatalf("ParseNumber(%q) = %v, %v; want a *ParseError naming the reply", tt.in, got, err)
				}
				return
			}
			if err != nil {
				t.Fatalf("ParseNumber(%q): %v", tt.in, err)
			}
			if math.IsNaN(tt.want) {
				if !math.IsNaN(got) {
					t.Fatalf("ParseNumber(%q) = %v, want NaN", tt.in, got)
				}
				return
			}
			if got != tt.want {
				t.Fatalf("ParseNumber(%q) = %v, want %v", tt.in, got, tt.want)
			}
		})
	}
}

func TestParseInt(t *testing.T) {
	tests := []struct {
		in   string
		want int
		bad  bool
	}{
		{"0", 0, false}, {"+12", 12, false}, {"-3", -3, false}, {" 255 ", 255, false},
		{"1.0", 0, true}, {"1E2", 0, true}, {"", 0, true}, {"x", 0, true},
		{"99999999999999999999", 0, true},
	}
	for _, tt := range tests {
		got, err := ParseInt(tt.in)
		if (err != nil) != tt.bad || got != tt.want {
			t.Errorf("ParseInt(%q) = %d, %v; want %d, bad=%v", tt.in, got, err, tt.want, tt.bad)
		}
	}
}

// Error-queue replies in the SCPI form `<code>,"<message>"` (SCPI-1999
// Vol. 2, SYSTem:ERRor; codes -222 "Data out of range" and 0 "No error" are
// the standard's, from memory). Doubled quotes inside a string are IEEE 488.2
// string response data.
func TestParseQueueEntry(t *testing.T) {
	tests := []struct {
		in   string
		want QueueEntry
		bad  bool
	}{
		{`0,"No error"`, QueueEntry{0, "No error"}, false},
		{`+0,"No error"`, QueueEntry{0, "No error"}, false},
		{`-222,"Data out of range"`, QueueEntry{-222, "Data out of range"}, false},
		{`-113, "Undefined header"`, QueueEntry{-113, "Undefined header"}, false},
		{`301,"say ""hi"""`, QueueEntry{301, `say "hi"`}, false},
		{`17,plain text`, QueueEntry{17, "plain text"}, false},
		{`0`, QueueEntry{0, ""}, false},
		{`-222,"unterminated`, QueueEntry{}, true},
		{`oops,"x"`, QueueEntry{}, true},
		{``, QueueEntry{}, true},
	}
	for _, tt := range tests {
		got, err := ParseQueueEntry(tt.in)
		if (err != nil) != tt.bad || got != tt.want {
			t.Errorf("ParseQueueEntry(%q) = %+v, %v; want %+v, bad=%v", tt.in, got, err, tt.want, tt.bad)
		}
	}
}

// Blocks as defined by IEEE 488.2 §8.7.9–10 (definite "#<n><len><data>",
// indefinite "#0<data> NL^END"; from memory). The worked example "#15hello"
// is the form instruments document for a 5-byte block.
func TestParseBlock(t *testing.T) {
	tests := []struct {
		name      string
		in        string
		data      string
		rest      string
		short     bool
		malformed bool
	}{
		{"definite", "#15hello\n", "hello", "\n", false, false},
		{"two digits", "#210abcdefghij", "abcdefghij", "", false, false},
		{"binary data with terminator bytes", "#14a\nb\rrest", "a\nb\r", "rest", false, false},
		{"empty definite", "#10\n", "", "\n", false, false},
		{"indefinite", "#0xyz\nnext", "xyz", "next", false, false},
		{"short data", "#15hel", "", "", true, false},
		{"short header", "#3", "", "", true, false},
		{"only hash", "#", "", "", true, false},
		{"empty", "", "", "", true, false},
		{"no hash", "15hello", "", "", false, true},
		{"letter digit", "#x5hello", "", "", false, true},
		{"bad length", "#2a5hello", "", "", false, true},
		{"too long", "#9999999999", "", "", false, true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			data, rest, err := ParseBlock([]byte(tt.in), "\n")
			switch {
			case tt.short:
				if !errors.Is(err, ErrShortBlock) {
					t.Fatalf("got %q %q %v, want ErrShortBlock", data, rest, err)
				}
			case tt.malformed:
				var pe *ParseError
				if !errors.As(err, &pe) {
					t.Fatalf("got %q %q %v, want *ParseError", data, rest, err)
				}
			default:
				if err != nil || string(data) != tt.data || string(rest) != tt.rest {
					t.Fatalf("got %q %q %v, want %q %q", data, rest, err, tt.data, tt.rest)
				}
			}
		})
	}
}

func FuzzParseNumber(f *testing.F) {
	for _, s := range []string{"1", "-2.5", "+1.0E-3", "9.9E37", "9.91E37", "INF", "nan", "1e", "0x10"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		v, err := ParseNumber(s)
		if err != nil {
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("ParseNumber(%q): error %v is not a *ParseError", s, err)
			}
			return
		}
		if math.IsInf(v, 0) || math.IsNaN(v) {
			return
		}
		// A finite result must round-trip through the NR3 form.
		back, err := ParseNumber(formatNR3(v))
		if err != nil || back != v {
			t.Fatalf("ParseNumber(%q) = %v; NR3 round trip gave %v, %v", s, v, back, err)
		}
	})
}

func formatNR3(v float64) string { return strconv.FormatFloat(v, 'E', -1, 64) }

func FuzzParseBlock(f *testing.F) {
	for _, s := range []string{"#15hello\n", "#0abc\n", "#210abcdefghij", "#3", "#x", "#9999999999", ""} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		data, rest, err := ParseBlock(b, "\n")
		if err != nil {
			var pe *ParseError
			if !errors.Is(err, ErrShortBlock) && !errors.As(err, &pe) {
				t.Fatalf("ParseBlock(%q): unexpected error kind %v", b, err)
			}
			return
		}
		// data and rest are views into b, in order, and never longer than it.
		if len(data)+len(rest) > len(b) {
			t.Fatalf("ParseBlock(%q): data %d + rest %d bytes exceed input %d", b, len(data), len(rest), len(b))
		}
		if len(rest) > 0 && string(b[len(b)-len(rest):]) != string(rest) {
			t.Fatalf("ParseBlock(%q): rest %q is not the input's tail", b, rest)
		}
	})
}
