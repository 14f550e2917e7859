// Package loopcsv reads a B–H loop from CSV and reports its figures, for
// `hystd analyze`. The CSV has a header row naming the columns H (A/m) and B
// (T), optionally t (s); other columns are ignored, lines starting with '#'
// are comments. H and B may be given in other units (Options). Every problem
// is reported with the file, line and column.
package loopcsv

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"text/tabwriter"

	"hystd/calib/loop"
	"hystd/calib/units"
)

// Options say which units the H and B columns are in; empty means SI.
type Options struct {
	HUnit string // "A/m" (default), "kA/m", "Oe", "kOe", or any unit ParseAmperePerMetre knows
	BUnit string // "T" (default), "mT", "G", "kG", or any unit ParseTesla knows
}

// Data is a loop read from CSV, in SI units.
type Data struct {
	T    []float64 // s; nil when the file has no t column
	H, B []float64
	Line []int // source line of each sample
}

// Error is a problem at a place in the CSV file.
type Error struct {
	File   string
	Line   int    // 0: the whole file
	Column string // "" when not about one column
	Msg    string
}

// Error prints "FILE:LINE: column C: problem".
func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	b.WriteString(": ")
	if e.Column != "" {
		fmt.Fprintf(&b, "column %s: ", e.Column)
	}
	b.WriteString(e.Msg)
	return b.String()
}

func factor(unit, si string, parse func(string) (float64, error)) (float64, error) {
	if unit == "" || unit == si {
		return 1, nil
	}
	f, err := parse("1 " + unit)
	if err != nil {
		return 0, fmt.Errorf("unit %q is not a unit of %s", unit, si)
	}
	return f, nil
}

// Read parses a loop from r; name is used in errors.
func Read(r io.Reader, name string, opt Options) (Data, error) {
	hf, err := factor(opt.HUnit, "A/m", func(s string) (float64, error) { v, err := units.ParseAmperePerMetre(s); return float64(v), err })
	if err != nil {
		return Data{}, &Error{File: name, Msg: "--h-unit: " + err.Error()}
	}
	bf, err := factor(opt.BUnit, "T", func(s string) (float64, error) { v, err := units.ParseTesla(s); return float64(v), err })
	if err != nil {
		return Data{}, &Error{File: name, Msg: "--b-unit: " + err.Error()}
	}
	cr := csv.NewReader(bufio.NewReader(r))
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	cr.ReuseRecord = true
	header, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return Data{}, &Error{File: name, Msg: "empty file: want a header row naming the columns H and B"}
	}
	if err != nil {
		return Data{}, csvError(name, err)
	}
	hl, _ := cr.FieldPos(0)
	col := map[string]int{}
	var names []string
	for i, c := range header {
		c = strings.TrimSpace(strings.TrimPrefix(c, "\ufeff"))
		names = append(names, c)
		if _, dup := col[c]; dup && (c == "H" || c == "B" || c == "t") {
			return Data{}, &Error{File: name, Line: hl, Column: c, Msg: "named twice in the header"}
		}
		col[c] = i
	}
	for _, need := range []string{"H", "B"} {
		if _, ok := col[need]; !ok {
			return Data{}, &Error{File: name, Line: hl, Msg: fmt.Sprintf("header has no column %q (columns: %s); want H in A/m and B in T, t in s optional",
				need, strings.Join(names, ", "))}
		}
	}
	ti, hasT := col["t"]
	var d Data
	nf := len(header)
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return Data{}, csvError(name, err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) != nf {
			return Data{}, &Error{File: name, Line: line, Msg: fmt.Sprintf("%d fields, the header has %d", len(rec), nf)}
		}
		num := func(c string, i int) (float64, error) {
			s := strings.TrimSpace(rec[i])
			v, err := strconv.ParseFloat(s, 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				return 0, &Error{File: name, Line: line, Column: c, Msg: fmt.Sprintf("%q is not a finite number", s)}
			}
			return v, nil
		}
		h, err := num("H", col["H"])
		if err != nil {
			return Data{}, err
		}
		b, err := num("B", col["B"])
		if err != nil {
			return Data{}, err
		}
		if hasT {
			t, err := num("t", ti)
			if err != nil {
				return Data{}, err
			}
			if n := len(d.T); n > 0 && t < d.T[n-1] {
				return Data{}, &Error{File: name, Line: line, Column: "t", Msg: fmt.Sprintf("time %g s runs backwards (previous %g s)", t, d.T[n-1])}
			}
			d.T = append(d.T, t)
		}
		d.H = append(d.H, h*hf)
		d.B = append(d.B, b*bf)
		d.Line = append(d.Line, line)
	}
	if len(d.H) == 0 {
		return Data{}, &Error{File: name, Msg: "no data rows after the header"}
	}
	return d, nil
}

func csvError(name string, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return &Error{File: name, Line: pe.Line, Msg: pe.Err.Error()}
	}
	return &Error{File: name, Msg: err.Error()}
}

// Num is a figure value for JSON: NaN (not available) is written as null,
// other values with 7 significant digits.
type Num float64

// MarshalJSON implements json.Marshaler.
func (n Num) MarshalJSON() ([]byte, error) {
	if math.IsNaN(float64(n)) || math.IsInf(float64(n), 0) {
		return []byte("null"), nil
	}
	return []byte(strconv.FormatFloat(float64(n), 'g', 7, 64)), nil
}

// Summary holds the figures `hystd analyze --json` prints, in SI units.
// Negative-branch values are magnitudes averaged over both branches;
// BHmax is the 2nd-quadrant maximum of |B·H|.
type Summary struct {
	HmaxAM   Num `json:"hmax_a_m"`
	BmaxT    Num `json:"bmax_t"`
	BrT      Num `json:"br_t"`
	HcBAM    Num `json:"hcb_a_m"`
	HcJAM    Num `json:"hcj_a_m"`
	MuA      Num `json:"mu_a"`
	LossJM3  Num `json:"loss_j_m3"`
	BHmaxJM3 Num `json:"bhmax_j_m3"`
}

// Result is the analysis of one file: the summary and the figures with
// their budgets (noise and sampling only: analyze knows no geometry or
// instruments).
type Result struct {
	Summary Summary
	Figures []loop.Figure
	Cycles  int
}

// Analyze computes the figures of d. It needs at least one full cycle
// (tip to tip and back); name is used in errors.
func Analyze(d Data, name string) (Result, error) {
	s, err := loop.Detect(d.H)
	if err != nil {
		return Result{}, &Error{File: name, Column: "H", Msg: err.Error()}
	}
	cy := s.Cycles()
	if len(cy) == 0 {
		return Result{}, &Error{File: name, Column: "H", Msg: fmt.Sprintf(
			"fewer than one full cycle: H must run from one tip to the other and back (found %d complete branch(es) in %d rows)",
			len(s.Complete()), len(d.H))}
	}
	fs, err := loop.Figures(d.T, d.H, d.B, s, loop.Options{})
	if err != nil {
		return Result{}, &Error{File: name, Msg: err.Error()}
	}
	get := func(n string) Num {
		for _, f := range fs {
			if f.Name == n {
				return Num(f.Value)
			}
		}
		return Num(math.NaN())
	}
	return Result{
		Summary: Summary{
			HmaxAM: get(loop.FigHmax), BmaxT: get(loop.FigBmax), BrT: get(loop.FigBr), HcBAM: get(loop.FigHcB),
			HcJAM: get(loop.FigHcJ), MuA: get(loop.FigMuA), LossJM3: get(loop.FigLossJM3), BHmaxJM3: get(loop.FigBHmax),
		},
		Figures: fs, Cycles: len(cy),
	}, nil
}

// WriteJSON writes the summary as one JSON object and a newline.
func (r Result) WriteJSON(w io.Writer) error {
	b, err := json.Marshal(r.Summary)
	if err != nil {
		return err
	}
	_, err = fmt.Fprintf(w, "%s\n", b)
	return err
}

// tableRows are the figures of the table, in order, with their labels.
var tableRows = []struct{ name, label string }{
	{loop.FigHmax, "Hmax"}, {loop.FigBmax, "Bmax"}, {loop.FigBr, "Br"}, {loop.FigHcB, "HcB"},
	{loop.FigHcJ, "HcJ"}, {loop.FigMuA, "mu_a"}, {loop.FigLossJM3, "loss per cycle"}, {loop.FigBHmax, "(BH)max"},
}

// WriteTable writes the figures as an aligned table with units and the
// expanded uncertainty (k = 2) of noise and sampling.
func (r Result) WriteTable(w io.Writer) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "figure\tvalue\tU (k=2)\tunit")
	for _, row := range tableRows {
		var f *loop.Figure
		for i := range r.Figures {
			if r.Figures[i].Name == row.name {
				f = &r.Figures[i]
			}
		}
		if f == nil {
			fmt.Fprintf(tw, "%s\t-\t-\t%s\n", row.label, loop.Units[row.name])
			continue
		}
		unit := f.Unit
		if unit == "" {
			unit = "1"
		}
		u := f.U
		if u < 1e-9*math.Abs(f.Value) {
			u = 0 // round-off, not an uncertainty
		}
		fmt.Fprintf(tw, "%s\t%.6g\t%.2g\t%s\n", row.label, f.Value, u, unit)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	_, err := fmt.Fprintf(w, "%d full cycle(s); U covers noise and sampling only (geometry and instruments are not known here).\n", r.Cycles)
	return err
}
