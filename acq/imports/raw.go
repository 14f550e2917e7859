package imports

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"
	"time"

	"hystd/acq/record"
	"hystd/calib/loopcsv"
	"hystd/calib/units"
)

// Raw is a recording read from CSV, in SI units, one record.Sample per data
// row (channels the file lacks are NaN; phases are filled in by Split when
// the file has no phase column).
type Raw struct {
	Samples   []record.Sample
	Line      []int // source line of each sample
	HasPhase  bool  // the file has a phase column
	HasProbe  bool
	HasTemp   bool
	Columns   []string // header fields as written
	FirstTime float64  // t of the first row, s (samples' T count from it)
}

// MaxTime bounds |t| (s): about three years, well inside what a
// time.Duration holds (292 years).
const MaxTime = 1e8

var headerName = regexp.MustCompile(`^\s*([^\s(\[]+)\s*(?:[(\[]\s*([^)\]]*?)\s*[)\]])?\s*$`)

// colSpec says how one known column is converted to SI.
type colSpec struct {
	name     string
	required bool
	si       string
	parse    func(string) (float64, error)
}

var known = []colSpec{
	{"t", true, "s", parseSecond},
	{"I", true, "A", func(s string) (float64, error) { v, err := units.ParseAmpere(s); return float64(v), err }},
	{"psi", true, "Wb", func(s string) (float64, error) {
		// "uV s", "µV·s", "mWb": the unit without spaces.
		v, err := units.ParseWeberTurn(strings.ReplaceAll(s, " ", ""))
		return float64(v), err
	}},
	{"B_probe", false, "T", func(s string) (float64, error) { v, err := units.ParseTesla(s); return float64(v), err }},
	{"temp", false, "°C", nil},
	{"phase", false, "", nil},
}

func parseSecond(s string) (float64, error) {
	f := strings.Fields(s)
	if len(f) != 2 {
		return 0, fmt.Errorf("bad time %q", s)
	}
	v, err := strconv.ParseFloat(f[0], 64)
	if err != nil {
		return 0, err
	}
	switch f[1] {
	case "s":
		return v, nil
	case "ms":
		return v * 1e-3, nil
	case "us", "µs", "μs":
		return v * 1e-6, nil
	case "min":
		return v * 60, nil
	}
	return 0, fmt.Errorf("unit %q is not a unit of time", f[1])
}

// ReadRaw parses a raw recording. The header names the columns t (s), I
// (A), psi (Wb-turns = V·s) and optionally B_probe (T), temp (°C) and phase
// (pre, sweep, post); a name may carry its unit in brackets ("I (mA)",
// "psi (uV s)", "t (ms)"). Other columns are ignored; '#' lines are
// comments; ',' or ';' separates fields. Every problem is a
// *loopcsv.Error naming the file, line and column; nothing is returned then.
func ReadRaw(r io.Reader, name string) (Raw, error) {
	data, err := io.ReadAll(r)
	if err != nil {
		return Raw{}, &loopcsv.Error{File: name, Msg: err.Error()}
	}
	comma := ','
	if first, _, _ := bytes.Cut(data, []byte("\n")); bytes.IndexByte(first, ',') < 0 && bytes.IndexByte(first, ';') >= 0 {
		comma = ';'
	}
	cr := csv.NewReader(bytes.NewReader(data))
	cr.Comma = comma
	cr.Comment = '#'
	cr.TrimLeadingSpace = true
	cr.FieldsPerRecord = -1
	c, err := readRawHeader(cr, name)
	if err != nil {
		return Raw{}, err
	}
	_, hasPhase := c.idx["phase"]
	_, hasProbe := c.idx["B_probe"]
	_, hasTemp := c.idx["temp"]
	out := Raw{HasPhase: hasPhase, HasProbe: hasProbe, HasTemp: hasTemp, Columns: c.names}
	prevT := math.Inf(-1)
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return Raw{}, csvErr(name, err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) != len(c.names) {
			return Raw{}, &loopcsv.Error{File: name, Line: line, Msg: fmt.Sprintf("%d fields, the header has %d", len(rec), len(c.names))}
		}
		t, err := c.time(rec, line, prevT)
		if err != nil {
			return Raw{}, err
		}
		if len(out.Samples) == 0 {
			out.FirstTime = t
		}
		prevT = t
		s, err := c.sample(rec, line, &out)
		if err != nil {
			return Raw{}, err
		}
		s.T = time.Duration(math.Round((t - out.FirstTime) * 1e9))
		out.Samples = append(out.Samples, s)
		out.Line = append(out.Line, line)
	}
	if len(out.Samples) == 0 {
		return Raw{}, &loopcsv.Error{File: name, Msg: "no data rows after the header"}
	}
	return out, nil
}

// rawColumns is a raw recording's header: the place and the factor to SI
// of each known column, by name, and every column's name.
type rawColumns struct {
	file   string
	idx    map[string]int
	factor map[string]float64
	names  []string
}

// readRawHeader reads the header and the units it gives the known columns.
func readRawHeader(cr *csv.Reader, name string) (rawColumns, error) {
	c := rawColumns{file: name, idx: map[string]int{}, factor: map[string]float64{}}
	header, err := cr.Read()
	if err != nil {
		if errors.Is(err, io.EOF) {
			return c, &loopcsv.Error{File: name, Msg: "empty file: want a header naming t, I and psi"}
		}
		return c, csvErr(name, err)
	}
	hl, _ := cr.FieldPos(0)
	for i, h := range header {
		h = strings.TrimSpace(strings.TrimPrefix(h, "\ufeff"))
		c.names = append(c.names, h)
		n, u := h, ""
		if m := headerName.FindStringSubmatch(h); m != nil {
			n, u = m[1], m[2]
		}
		for _, k := range known {
			if k.name != n {
				continue
			}
			if _, dup := c.idx[n]; dup {
				return c, &loopcsv.Error{File: name, Line: hl, Column: n, Msg: "named twice in the header"}
			}
			c.idx[n] = i
			f, msg := k.factor(u)
			if msg != "" {
				return c, &loopcsv.Error{File: name, Line: hl, Column: n, Msg: msg}
			}
			c.factor[n] = f
		}
	}
	for _, k := range known {
		if _, ok := c.idx[k.name]; k.required && !ok {
			return c, &loopcsv.Error{File: name, Line: hl, Msg: fmt.Sprintf("header has no column %q (columns: %s); want t (s), I (A), psi (Wb-turns), optional B_probe (T), temp (°C), phase",
				k.name, strings.Join(c.names, ", "))}
		}
	}
	return c, nil
}

// factor is the factor to SI of the column written in unit u, or why u
// is not a unit of the column.
func (k colSpec) factor(u string) (float64, string) {
	switch {
	case u == "" || u == k.si:
		return 1, ""
	case k.parse == nil:
		if !(k.name == "temp" && (u == "degC" || u == "C")) {
			return 0, fmt.Sprintf("unit %q: want %s", u, k.si)
		}
		return 1, ""
	}
	v, err := k.parse("1 " + u)
	if err != nil || !(v > 0) {
		return 0, fmt.Sprintf("unit %q is not a unit of %s", u, k.si)
	}
	return v, ""
}

// num is the value of column col in SI.
func (c rawColumns) num(rec []string, col string, line int) (float64, error) {
	s := strings.TrimSpace(rec[c.idx[col]])
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, &loopcsv.Error{File: c.file, Line: line, Column: col, Msg: fmt.Sprintf("%q is not a finite number", s)}
	}
	return v * c.factor[col], nil
}

// time is the row's time in s: within MaxTime, never before prevT.
func (c rawColumns) time(rec []string, line int, prevT float64) (float64, error) {
	t, err := c.num(rec, "t", line)
	if err != nil {
		return 0, err
	}
	if math.Abs(t) > MaxTime {
		return 0, &loopcsv.Error{File: c.file, Line: line, Column: "t", Msg: fmt.Sprintf("time %g s out of range (|t| ≤ %g s)", t, MaxTime)}
	}
	if t < prevT {
		return 0, &loopcsv.Error{File: c.file, Line: line, Column: "t", Msg: fmt.Sprintf("time %g s runs backwards (previous %g s)", t, prevT)}
	}
	return t, nil
}

// sample is the row's channels (its time is the caller's): I and psi, and
// B_probe, temp and phase when the recording has them.
func (c rawColumns) sample(rec []string, line int, r *Raw) (record.Sample, error) {
	s := record.Sample{BProbe: math.NaN(), TempC: math.NaN(), V: math.NaN(), Setpoint: math.NaN()}
	var err error
	if s.I, err = c.num(rec, "I", line); err != nil {
		return s, err
	}
	if s.Psi, err = c.num(rec, "psi", line); err != nil {
		return s, err
	}
	if r.HasProbe {
		if s.BProbe, err = c.num(rec, "B_probe", line); err != nil {
			return s, err
		}
	}
	if r.HasTemp {
		if s.TempC, err = c.num(rec, "temp", line); err != nil {
			return s, err
		}
	}
	if r.HasPhase {
		switch p := record.Phase(strings.TrimSpace(rec[c.idx["phase"]])); p {
		case record.PreHold, record.Sweep, record.PostHold:
			s.Phase = p
		default:
			return s, &loopcsv.Error{File: c.file, Line: line, Column: "phase", Msg: fmt.Sprintf("%q: want pre, sweep or post", p)}
		}
	}
	s.Setpoint = s.I
	return s, nil
}

func csvErr(name string, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return &loopcsv.Error{File: name, Line: pe.Line, Msg: pe.Err.Error()}
	}
	return &loopcsv.Error{File: name, Msg: err.Error()}
}
