package scpi

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// SCPI's special numeric values (SCPI-1999 Vol. 1, 7.2.1.4–5, from memory):
// the instrument answers 9.9E37 for +infinity (overflow), -9.9E37 for
// -infinity and 9.91E37 for not-a-number.
const (
	Overflow = 9.9e37
	NotANum  = 9.91e37
)

// ParseError is a reply that does not have the form asked for.
type ParseError struct {
	Reply string // the reply as received, terminator removed
	Want  string // what was expected, e.g. "a number (NR1, NR2 or NR3)"
	Err   error  // detail, may be nil
}

func (e *ParseError) Error() string {
	s := fmt.Sprintf("reply %q is not %s", clip(e.Reply), e.Want)
	if e.Err != nil {
		s += ": " + e.Err.Error()
	}
	return s
}

func (e *ParseError) Unwrap() error { return e.Err }

func clip(s string) string {
	if len(s) > 80 {
		return s[:77] + "..."
	}
	return s
}

// ParseNumber parses a numeric response: decimal numbers in the IEEE 488.2
// forms NR1 (integer), NR2 (fixed point) and NR3 (exponent), each with or
// without a sign; surrounding blanks are ignored. The SCPI special values
// map to IEEE floats: ±9.9E37 (in any decimal spelling) to ±Inf, 9.91E37 to
// NaN, and the words INF, -INF, NAN (any case) likewise. Anything else (hex,
// underscores, "Infinity", trailing text) is a *ParseError.
func ParseNumber(s string) (float64, error) {
	t := strings.TrimSpace(s)
	switch strings.ToUpper(t) {
	case "INF", "+INF":
		return math.Inf(1), nil
	case "-INF", "NINF":
		return math.Inf(-1), nil
	case "NAN":
		return math.NaN(), nil
	}
	if !isDecimal(t) {
		return 0, &ParseError{Reply: s, Want: "a number (NR1, NR2 or NR3)"}
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil {
		var ne *strconv.NumError
		if errors.As(err, &ne) && errors.Is(ne.Err, strconv.ErrRange) {
			return 0, &ParseError{Reply: s, Want: "a number within float64 range"}
		}
		return 0, &ParseError{Reply: s, Want: "a number (NR1, NR2 or NR3)", Err: err}
	}
	switch v {
	case Overflow:
		return math.Inf(1), nil
	case -Overflow:
		return math.Inf(-1), nil
	case NotANum, -NotANum:
		return math.NaN(), nil
	}
	return v, nil
}

// isDecimal reports whether t is [+-] digits [. digits] [(E|e) [+-] digits]
// with at least one mantissa digit.
func isDecimal(t string) bool {
	i := 0
	if i < len(t) && (t[i] == '+' || t[i] == '-') {
		i++
	}
	digits := 0
	for i < len(t) && t[i] >= '0' && t[i] <= '9' {
		i++
		digits++
	}
	if i < len(t) && t[i] == '.' {
		i++
		for i < len(t) && t[i] >= '0' && t[i] <= '9' {
			i++
			digits++
		}
	}
	if digits == 0 {
		return false
	}
	if i < len(t) && (t[i] == 'E' || t[i] == 'e') {
		i++
		if i < len(t) && (t[i] == '+' || t[i] == '-') {
			i++
		}
		exp := 0
		for i < len(t) && t[i] >= '0' && t[i] <= '9' {
			i++
			exp++
		}
		if exp == 0 {
			return false
		}
	}
	return i == len(t)
}

// ParseInt parses an NR1 integer response (with or without sign).
func ParseInt(s string) (int, error) {
	t := strings.TrimSpace(s)
	if t == "" || !isDecimal(t) || strings.ContainsAny(t, ".eE") {
		return 0, &ParseError{Reply: s, Want: "an integer (NR1)"}
	}
	v, err := strconv.Atoi(t)
	if err != nil {
		return 0, &ParseError{Reply: s, Want: "an integer (NR1) within range", Err: err}
	}
	return v, nil
}

// QueueEntry is one entry of an instrument's error queue.
type QueueEntry struct {
	Code int
	Msg  string
}

// ParseQueueEntry parses an error-queue reply: an NR1 code, a comma and a
// string, normally quoted (`-222,"Data out of range"`); inside quotes a
// doubled quote stands for one (IEEE 488.2 string response data). An
// unquoted message is accepted as is.
func ParseQueueEntry(s string) (QueueEntry, error) {
	codeText, rest, ok := strings.Cut(strings.TrimSpace(s), ",")
	if !ok {
		// Some instruments answer a bare code for "no error".
		code, err := ParseInt(codeText)
		if err != nil {
			return QueueEntry{}, &ParseError{Reply: s, Want: `an error-queue entry (code,"message")`}
		}
		return QueueEntry{Code: code}, nil
	}
	code, err := ParseInt(codeText)
	if err != nil {
		return QueueEntry{}, &ParseError{Reply: s, Want: `an error-queue entry (code,"message")`}
	}
	msg := strings.TrimSpace(rest)
	if len(msg) >= 2 && msg[0] == '"' && msg[len(msg)-1] == '"' {
		msg = strings.ReplaceAll(msg[1:len(msg)-1], `""`, `"`)
	} else if strings.HasPrefix(msg, `"`) {
		return QueueEntry{}, &ParseError{Reply: s, Want: `an error-queue entry (code,"message")`, Err: errors.New("unterminated string")}
	}
	return QueueEntry{Code: code, Msg: msg}, nil
}

// InstrumentError is what the instrument's error queue held after a
// command: the first entry, and any further ones in More.
type InstrumentError struct {
	Command string // the command after which the queue was read
	Code    int
	Msg     string
	More    []QueueEntry
}

func (e *InstrumentError) Error() string {
	s := fmt.Sprintf("instrument error after %q: %d %q", e.Command, e.Code, e.Msg)
	if len(e.More) > 0 {
		s += fmt.Sprintf(" (and %d more:", len(e.More))
		for _, m := range e.More {
			s += fmt.Sprintf(" %d %q", m.Code, m.Msg)
		}
		s += ")"
	}
	return s
}
