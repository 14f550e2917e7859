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
	header, err := cr.Read()
	if err != nil {
		if errors.Is(err, io.EOF) {
			return Raw{}, &loopcsv.Error{File: name, Msg: "empty file: want a header naming t, I and psi"}
		}
		return Raw{}, csvErr(name, err)
	}
	hl, _ := cr.FieldPos(0)
	idx := map[string]int{}
	factor := map[string]float64{}
	var names []string
	for i, h := range header {
		h = strings.TrimSpace(strings.TrimPrefix(h, "\ufeff"))
		names = append(names, h)
		n, u := h, ""
		if m := headerName.FindStringSubmatch(h); m != nil {
			n, u = m[1], m[2]
		}
		for _, k := range known {
			if k.name != n {
				continue
			}
			if _, dup := idx[n]; dup {
				return Raw{}, &loopcsv.Error{File: name, Line: hl, Column: n, Msg: "named twice in the header"}
			}
			idx[n] = i
			f := 1.0
			switch {
			case u == "" || u == k.si:
			case k.parse == nil:
				if !(n == "temp" && (u == "degC" || u == "C")) {
					return Raw{}, &loopcsv.Error{File: name, Line: hl, Column: n, Msg: fmt.Sprintf("unit %q: want %s", u, k.si)}
				}
			default:
				v, err := k.parse("1 " + u)
				if err != nil || !(v > 0) {
					return Raw{}, &loopcsv.Error{File: name, Line: hl, Column: n, Msg: fmt.Sprintf("unit %q is not a unit of %s", u, k.si)}
				}
				f = v
			}
			factor[n] = f
		}
	}
	for _, k := range known {
		if _, ok := idx[k.name]; k.required && !ok {
			return Raw{}, &loopcsv.Error{File: name, Line: hl, Msg: fmt.Sprintf("header has no column %q (columns: %s); want t (s), I (A), psi (Wb-turns), optional B_probe (T), temp (°C), phase",
				k.name, strings.Join(names, ", "))}
		}
	}
	_, hasPhase := idx["phase"]
	_, hasProbe := idx["B_probe"]
	_, hasTemp := idx["temp"]
	out := Raw{HasPhase: hasPhase, HasProbe: hasProbe, HasTemp: hasTemp, Columns: names}
	num := func(rec []string, col string, line int) (float64, error) {
		s := strings.TrimSpace(rec[idx[col]])
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return 0, &loopcsv.Error{File: name, Line: line, Column: col, Msg: fmt.Sprintf("%q is not a finite number", s)}
		}
		return v * factor[col], nil
	}
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
		if len(rec) != len(header) {
			return Raw{}, &loopcsv.Error{File: name, Line: line, Msg: fmt.Sprintf("%d fields, the header has %d", len(rec), len(header))}
		}
		s := record.Sample{BProbe: math.NaN(), TempC: math.NaN(), V: math.NaN(), Setpoint: math.NaN()}
		t, err := num(rec, "t", line)
		if err != nil {
			return Raw{}, err
		}
		if math.Abs(t) > MaxTime {
			return Raw{}, &loopcsv.Error{File: name, Line: line, Column: "t", Msg: fmt.Sprintf("time %g s out of range (|t| ≤ %g s)", t, MaxTime)}
		}
		if t < prevT {
			return Raw{}, &loopcsv.Error{File: name, Line: line, Column: "t", Msg: fmt.Sprintf("time %g s runs backwards (previous %g s)", t, prevT)}
		}
		if len(out.Samples) == 0 {
			out.FirstTime = t
		}
		prevT = t
		s.T = time.Duration(math.Round((t - out.FirstTime) * 1e9))
		if s.I, err = num(rec, "I", line); err != nil {
			return Raw{}, err
		}
		if s.Psi, err = num(rec, "psi", line); err != nil {
			return Raw{}, err
		}
		if hasProbe {
			if s.BProbe, err = num(rec, "B_probe", line); err != nil {
				return Raw{}, err
			}
		}
		if hasTemp {
			if s.TempC, err = num(rec, "temp", line); err != nil {
				return Raw{}, err
			}
		}
		if hasPhase {
			switch p := record.Phase(strings.TrimSpace(rec[idx["phase"]])); p {
			case record.PreHold, record.Sweep, record.PostHold:
				s.Phase = p
			default:
				return Raw{}, &loopcsv.Error{File: name, Line: line, Column: "phase", Msg: fmt.Sprintf("%q: want pre, sweep or post", p)}
			}
		}
		s.Setpoint = s.I
		out.Samples = append(out.Samples, s)
		out.Line = append(out.Line, line)
	}
	if len(out.Samples) == 0 {
		return Raw{}, &loopcsv.Error{File: name, Msg: "no data rows after the header"}
	}
	return out, nil
}

func csvErr(name string, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return &loopcsv.Error{File: name, Line: pe.Line, Msg: pe.Err.Error()}
	}
	return &loopcsv.Error{File: name, Msg: err.Error()}
}
