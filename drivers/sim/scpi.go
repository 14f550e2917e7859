package sim

import (
	"fmt"
	"strconv"
	"strings"

	"hystd/drivers/profile"
)

// scpiError is one entry of an instrument's error queue, in SCPI form
// (IEEE 488.2 / SCPI-99 standard codes and messages).
type scpiError struct {
	Code int
	Msg  string
}

// String renders the entry as an error-queue reply: the code, a comma and
// the message as IEEE 488.2 string data (quotes doubled).
func (e scpiError) String() string {
	return fmt.Sprintf(`%d,"%s"`, e.Code, strings.ReplaceAll(e.Msg, `"`, `""`))
}

var (
	errNone          = scpiError{0, "No error"}
	errDataType      = scpiError{-104, "Data type error"}
	errParamNotAllow = scpiError{-108, "Parameter not allowed"}
	errMissingParam  = scpiError{-109, "Missing parameter"}
	errUndefHeader   = scpiError{-113, "Undefined header"}
	errSettings      = scpiError{-221, "Settings conflict"}
	errOutOfRange    = scpiError{-222, "Data out of range"}
	errQueueOverflow = scpiError{-350, "Queue overflow"}
)

// errorQueueLen is the depth of the error queue; on overflow the newest
// entry is replaced by -350 (SCPI-99 §21.8).
const errorQueueLen = 10

// Event status register bits (IEEE 488.2 §11.5.1).
const (
	esrOPC = 1 << 0
	esrQYE = 1 << 2
	esrDDE = 1 << 3
	esrEXE = 1 << 4
	esrCME = 1 << 5
	esrPON = 1 << 7
)

// scpiState is the IEEE 488.2 part of one simulated instrument: error
// queue, event status and enable registers.
type scpiState struct {
	queue    []scpiError
	esr, ese int
}

func (s *scpiState) push(e scpiError) {
	switch {
	case e.Code <= -100 && e.Code > -200:
		s.esr |= esrCME
	case e.Code <= -200 && e.Code > -300:
		s.esr |= esrEXE
	case e.Code <= -400 && e.Code > -500:
		s.esr |= esrQYE
	default:
		s.esr |= esrDDE
	}
	if len(s.queue) >= errorQueueLen {
		s.queue[len(s.queue)-1] = errQueueOverflow
		return
	}
	s.queue = append(s.queue, e)
}

func (s *scpiState) pop() scpiError {
	if len(s.queue) == 0 {
		return errNone
	}
	e := s.queue[0]
	s.queue = s.queue[1:]
	return e
}

// stb is the status byte: bit 2 error/event queue not empty (SCPI), bit 5
// ESB (ESR & ESE ≠ 0), bit 6 MSS.
func (s *scpiState) stb() int {
	v := 0
	if len(s.queue) > 0 {
		v |= 1 << 2
	}
	if s.esr&s.ese != 0 {
		v |= 1 << 5
	}
	if v != 0 {
		v |= 1 << 6
	}
	return v
}

// matcher recognises the command lines of one operation of a profile.
// Two pseudo-operations complete the profile: an operation's Poll query
// (answered with its PollDone: the simulated operation is done at once)
// and the literal lines of Init and SafeState that are no operation
// (accepted and ignored, e.g. a remote-lock command).
type matcher struct {
	name   string // operation name, or opPoll / opLiteral
	op     profile.Operation
	query  bool
	prefix string // upper case; for templates with "{}", the part before it
	suffix string // upper case; after "{}"
	arg    bool   // the template has a "{}" placeholder
}

// match sets what m recognises from a command template: its normalized
// text, split at a "{}" placeholder when it has one.
func (m *matcher) match(tmpl string) {
	tmpl = normalize(tmpl)
	if i := strings.Index(tmpl, "{}"); i >= 0 {
		m.arg = true
		m.prefix, m.suffix = strings.ToUpper(tmpl[:i]), strings.ToUpper(tmpl[i+2:])
	} else {
		m.prefix = strings.ToUpper(tmpl)
	}
}

func newMatchers(p profile.Profile) []matcher {
	var ms []matcher
	for name, op := range p.Operations {
		m := matcher{name: name, op: op}
		tmpl := op.Set
		if op.Query != "" {
			m.query, tmpl = true, op.Query
		}
		m.match(tmpl)
		ms = append(ms, m)
		if op.Poll != "" {
			ms = append(ms, matcher{name: opPoll, query: true, prefix: strings.ToUpper(normalize(op.Poll)),
				op: profile.Operation{PollDone: op.PollDone}})
		}
	}
	ms = append(ms, bufferedMatchers(p)...)
	ms = append(ms, rampMatchers(p)...)
	for _, l := range append(append([]string{}, p.Init...), p.SafeState...) {
		if _, _, ok := match(ms, normalize(l)); !ok && !strings.HasPrefix(l, "*") {
			ms = append(ms, matcher{name: opLiteral, prefix: strings.ToUpper(normalize(l))})
		}
	}
	return ms
}

// Names of the pseudo-operations.
const (
	opPoll    = "(poll)"
	opLiteral = "(literal)"
)

// normalize trims a command and collapses runs of blanks into one space.
func normalize(s string) string { return strings.Join(strings.Fields(s), " ") }

// match finds the operation a normalized line invokes and its argument.
// Templates without placeholder are tried first.
func match(ms []matcher, line string) (matcher, string, bool) {
	up := strings.ToUpper(line)
	for _, m := range ms {
		if !m.arg && up == m.prefix {
			return m, "", true
		}
	}
	for _, m := range ms {
		if m.arg && len(up) > len(m.prefix)+len(m.suffix) &&
			strings.HasPrefix(up, m.prefix) && strings.HasSuffix(up, m.suffix) {
			return m, strings.TrimSpace(line[len(m.prefix) : len(line)-len(m.suffix)]), true
		}
	}
	return matcher{}, "", false
}

// value is a setting's argument decoded per the profile: through the
// inverse of Map when the operation has one (Key holds the map key, e.g.
// "true"), else as a number in SI (instrument value × Scale).
type value struct {
	Key string
	Num float64
}

func scale(op profile.Operation) float64 {
	if op.Scale == 0 {
		return 1
	}
	return op.Scale
}

// decodeArg turns the instrument-side argument into a value, or an SCPI error.
func decodeArg(op profile.Operation, arg string) (value, *scpiError) {
	if len(op.Map) > 0 {
		for k, v := range op.Map {
			if strings.EqualFold(v, arg) {
				n, _ := strconv.ParseFloat(k, 64)
				return value{Key: k, Num: n}, nil
			}
		}
		return value{}, &errDataType
	}
	n, err := strconv.ParseFloat(arg, 64)
	if err != nil {
		return value{}, &errDataType
	}
	n *= scale(op)
	if len(op.Range) == 2 && (n < op.Range[0] || n > op.Range[1]) {
		return value{}, &errOutOfRange
	}
	return value{Num: n}, nil
}

// reply is what a query handler returns: a number in SI, a boolean, an
// integer or an enum key; encodeReply renders it per the profile.
type reply struct {
	Num  float64
	Bool bool
	Int  int
	Key  string
	// Overflow renders the SCPI overflow value 9.9E37 (reading over range).
	Overflow bool
	// Raw, when not empty, is sent as it is (a block, a clock reading).
	Raw string
}

// encodeReply renders a query's value the way the profile says it is parsed.
func encodeReply(op profile.Operation, r reply) string {
	if r.Raw != "" {
		return r.Raw
	}
	num := func() string {
		if r.Overflow {
			return "9.9E37"
		}
		return strconv.FormatFloat(r.Num/scale(op), 'E', 6, 64)
	}
	parse := op.Parse
	switch {
	case parse == "bool":
		key := "false"
		if r.Bool {
			key = "true"
		}
		for k, v := range op.Map {
			if v == key {
				return k
			}
		}
		if r.Bool {
			return "1"
		}
		return "0"
	case parse == "int":
		return strconv.Itoa(r.Int)
	case parse == "enum":
		for k, v := range op.Map {
			if v == r.Key {
				return k
			}
		}
		return r.Key
	case parse == "number-unit":
		// The suffix with factor 1 (the instrument unit), else Unit.
		unit := op.Unit
		for sfx, f := range op.Suffixes {
			if f == 1 {
				unit = sfx
				break
			}
		}
		return num() + " " + unit
	case strings.HasPrefix(parse, "field:"):
		// N counts from 1; the fields before the value are status codes, 0.
		n, err := strconv.Atoi(strings.TrimPrefix(parse, "field:"))
		if err != nil || n < 1 {
			n = 1
		}
		f := make([]string, n)
		for i := range f {
			f[i] = "0"
		}
		f[n-1] = num()
		sep := op.Separator
		if sep == "" {
			sep = ","
		}
		return strings.Join(f, sep)
	default:
		return num()
	}
}

// idn renders the *IDN? reply with four fields: maker and model from the
// profile's identity (padded when it has fewer fields), serial, firmware.
func idn(identity, role string, serial int) string {
	f := strings.Split(identity, ",")
	if len(f) >= 4 {
		return strings.Join(f[:4], ",")
	}
	for len(f) < 2 {
		f = append(f, strings.ToUpper(role))
	}
	return fmt.Sprintf("%s,%s,SIM%05d,1.0", f[0], f[1], serial)
}
