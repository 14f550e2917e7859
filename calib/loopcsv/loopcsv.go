package loopcsv

import (
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"regexp"
	"strconv"
	"strings"
	"text/tabwriter"
	"unicode"
	"unicode/utf8"

	"hystd/calib/loop"
	"hystd/calib/units"
)

// Options say which units the H and B columns are in; empty means the unit
// named in the header, else SI. A unit given here and a different one in
// the header is an error.
type Options struct {
	HUnit string // "A/m", "kA/m", "Oe", "kOe", or any unit ParseAmperePerMetre knows
	BUnit string // "T", "mT", "G", "kG", or any unit ParseTesla knows
}

// headerName splits a header field into its name and the unit in brackets.
var headerName = regexp.MustCompile(`^\s*([^\s(\[]+)\s*(?:[(\[]\s*([^)\]]*?)\s*[)\]])?\s*$`)

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
//
// A file without any '"' is read by a splitter of its own: the whole file
// is read into one string (grown to the file's size when r is a file), the
// slices are allocated once for the number of lines, and fields are
// substrings of it, so a row costs no allocation. It follows encoding/csv
// (TrimLeadingSpace, Comment '#', "\r\n" as "\n", empty lines skipped,
// line numbers counting every physical line), so it accepts, refuses and
// reports exactly what encoding/csv does on such files. A file with quotes
// is read with encoding/csv.
func Read(r io.Reader, name string, opt Options) (Data, error) {
	raw, err := readAll(r)
	if err != nil {
		return Data{}, &Error{File: name, Msg: err.Error()}
	}
	comma := sniffComma(raw)
	if strings.IndexByte(raw, '"') >= 0 {
		return readQuoted(raw, comma, name, opt)
	}
	return readPlain(raw, comma, name, opt)
}

// readAll reads r into one string, sized up front when r can tell its size
// (a regular file, or an in-memory reader).
func readAll(r io.Reader) (string, error) {
	var b strings.Builder
	switch x := r.(type) {
	case interface{ Stat() (fs.FileInfo, error) }:
		if fi, err := x.Stat(); err == nil && fi.Mode().IsRegular() && fi.Size() > 0 && fi.Size() < 1<<40 {
			b.Grow(int(fi.Size()) + 1)
		}
	case interface{ Len() int }: // bytes.Reader, strings.Reader, bytes.Buffer
		b.Grow(x.Len())
	}
	if _, err := io.Copy(&b, r); err != nil {
		return "", err
	}
	return b.String(), nil
}

// columns is what the header says: where H, B and t are and their factors
// to SI.
type columns struct {
	h, b, t    int
	hasT       bool
	hf, bf, tf float64
	n          int // fields in the header
}

// parseHeader reads the header fields (as encoding/csv gives them) found at
// line hl.
func parseHeader(header []string, hl int, name string, opt Options) (columns, error) {
	col := map[string]int{}
	unit := map[string]string{}
	var names []string
	for i, c := range header {
		c = strings.TrimSpace(strings.TrimPrefix(c, "\ufeff"))
		names = append(names, c)
		u := ""
		if m := headerName.FindStringSubmatch(c); m != nil {
			c, u = m[1], m[2]
		}
		if _, dup := col[c]; dup && (c == "H" || c == "B" || c == "t") {
			return columns{}, &Error{File: name, Line: hl, Column: c, Msg: "named twice in the header"}
		}
		col[c] = i
		unit[c] = u
	}
	for _, need := range []string{"H", "B"} {
		if _, ok := col[need]; !ok {
			return columns{}, &Error{File: name, Line: hl, Msg: fmt.Sprintf("header has no column %q (columns: %s); want H in A/m and B in T, t in s optional",
				need, strings.Join(names, ", "))}
		}
	}
	pick := func(c, flag, header string) (string, error) {
		if flag != "" && header != "" && flag != header {
			return "", &Error{File: name, Line: hl, Column: c, Msg: fmt.Sprintf("the header says %q, the option --%s-unit %q", header, strings.ToLower(c), flag)}
		}
		if flag != "" {
			return flag, nil
		}
		return header, nil
	}
	hu, err := pick("H", opt.HUnit, unit["H"])
	if err != nil {
		return columns{}, err
	}
	bu, err := pick("B", opt.BUnit, unit["B"])
	if err != nil {
		return columns{}, err
	}
	hf, err := factor(hu, "A/m", func(s string) (float64, error) { v, err := units.ParseAmperePerMetre(s); return float64(v), err })
	if err != nil {
		where := "--h-unit: "
		if opt.HUnit == "" {
			where = fmt.Sprintf("line %d: column H: ", hl)
		}
		return columns{}, &Error{File: name, Msg: where + err.Error()}
	}
	bf, err := factor(bu, "T", func(s string) (float64, error) { v, err := units.ParseTesla(s); return float64(v), err })
	if err != nil {
		where := "--b-unit: "
		if opt.BUnit == "" {
			where = fmt.Sprintf("line %d: column B: ", hl)
		}
		return columns{}, &Error{File: name, Msg: where + err.Error()}
	}
	tf := 1.0
	switch unit["t"] {
	case "", "s":
	case "ms":
		tf = 1e-3
	default:
		return columns{}, &Error{File: name, Line: hl, Column: "t", Msg: fmt.Sprintf("unit %q: want s or ms", unit["t"])}
	}
	ti, hasT := col["t"]
	return columns{h: col["H"], b: col["B"], t: ti, hasT: hasT, hf: hf, bf: bf, tf: tf, n: len(header)}, nil
}

// row appends one record's values to d; line is its line number.
func (c *columns) row(d *Data, rec []string, line int, name string) error {
	if len(rec) != c.n {
		return &Error{File: name, Line: line, Msg: fmt.Sprintf("%d fields, the header has %d", len(rec), c.n)}
	}
	h, err := number(rec[c.h], "H", line, name)
	if err != nil {
		return err
	}
	b, err := number(rec[c.b], "B", line, name)
	if err != nil {
		return err
	}
	if c.hasT {
		t, err := number(rec[c.t], "t", line, name)
		if err != nil {
			return err
		}
		if n := len(d.T); n > 0 && t*c.tf < d.T[n-1] {
			return &Error{File: name, Line: line, Column: "t", Msg: fmt.Sprintf("time %g s runs backwards (previous %g s)", t*c.tf, d.T[n-1])}
		}
		d.T = append(d.T, t*c.tf)
	}
	d.H = append(d.H, h*c.hf)
	d.B = append(d.B, b*c.bf)
	d.Line = append(d.Line, line)
	return nil
}

// number parses one field of column c as a finite float.
func number(s, c string, line int, name string) (float64, error) {
	if len(s) > 0 && (isSpaceStart(s[0]) || isSpaceStart(s[len(s)-1])) {
		s = strings.TrimSpace(s)
	}
	if v, ok := parseDecimal(s); ok {
		return v, nil
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, &Error{File: name, Line: line, Column: c, Msg: fmt.Sprintf("%q is not a finite number", s)}
	}
	return v, nil
}

// pow10 holds the powers of ten that are exact in a float64.
var pow10 = [...]float64{1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11,
	1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// parseDecimal parses [+-]digits[.digits][(e|E)[+-]digits] when the
// digits form an integer below 2⁵³ and the decimal exponent is within
// ±22: then mantissa and power of ten are exact and one multiplication or
// division rounds correctly (Clinger's fast path, as strconv uses it), so
// the value equals strconv.ParseFloat's. Anything else reports !ok and
// goes to strconv.ParseFloat.
func parseDecimal(s string) (float64, bool) {
	i, neg := 0, false
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		neg = s[i] == '-'
		i++
	}
	start := i
	i, mant, digits, ok := digitRun(s, i, 0, 0)
	if !ok {
		return 0, false
	}
	seen, exp := i > start, 0
	if i < len(s) && s[i] == '.' {
		frac := i + 1
		if i, mant, _, ok = digitRun(s, frac, mant, digits); !ok {
			return 0, false
		}
		exp = frac - i
		seen = seen || i > frac
	}
	if !seen {
		return 0, false
	}
	e, i, ok := exponent(s, i)
	if !ok {
		return 0, false
	}
	exp += e
	if i != len(s) || mant >= 1<<53 || exp < -22 || exp > 22 {
		return 0, false
	}
	f := float64(mant)
	if exp < 0 {
		f /= pow10[-exp]
	} else {
		f *= pow10[exp]
	}
	if neg {
		f = -f
	}
	return f, true
}

// digitRun reads the digits at s[i:] into mant, which holds digits
// significant digits so far; false when they would be more than 18 (the
// fast path does not apply).
func digitRun(s string, i int, mant uint64, digits int) (int, uint64, int, bool) {
	for ; i < len(s) && s[i] >= '0' && s[i] <= '9'; i++ {
		if digits >= 18 {
			return i, mant, digits, false
		}
		mant = mant*10 + uint64(s[i]-'0')
		if mant > 0 {
			digits++
		}
	}
	return i, mant, digits, true
}

// exponent reads an exponent ((e|E)[+-]digits) at s[i:], if one is there:
// its value and where it ends; false when it has no digits or is beyond
// any the fast path takes.
func exponent(s string, i int) (int, int, bool) {
	if i >= len(s) || (s[i] != 'e' && s[i] != 'E') {
		return 0, i, true
	}
	i++
	neg := false
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		neg = s[i] == '-'
		i++
	}
	start, e := i, 0
	for ; i < len(s) && s[i] >= '0' && s[i] <= '9'; i++ {
		if e > 1000 {
			return 0, i, false
		}
		e = e*10 + int(s[i]-'0')
	}
	if i == start {
		return 0, i, false
	}
	if neg {
		e = -e
	}
	return e, i, true
}

// isSpaceStart reports whether a byte may be (the first or last byte of) a
// Unicode space: ASCII space and controls, or any non-ASCII byte.
func isSpaceStart(c byte) bool { return c <= ' ' || c >= utf8.RuneSelf }

// readPlain reads a file that holds no '"'.
func readPlain(raw string, comma byte, name string, opt Options) (Data, error) {
	var (
		c      columns
		d      Data
		rec    []string
		header = true
		line   int
	)
	for rest := raw; len(rest) > 0; {
		var l string
		if i := strings.IndexByte(rest, '\n'); i >= 0 {
			l, rest = rest[:i], rest[i+1:]
		} else {
			l, rest = rest, ""
		}
		line++
		if n := len(l); n > 0 && l[n-1] == '\r' {
			l = l[:n-1] // encoding/csv: "\r\n" is "\n", a last "\r" before EOF is dropped
		}
		if len(l) == 0 || l[0] == '#' {
			continue
		}
		rec = rec[:0]
		for {
			i := strings.IndexByte(l, comma)
			f := l
			if i >= 0 {
				f = l[:i]
			}
			if len(f) > 0 && isSpaceStart(f[0]) {
				f = strings.TrimLeftFunc(f, unicode.IsSpace)
			}
			rec = append(rec, f)
			if i < 0 {
				break
			}
			l = l[i+1:]
		}
		if header {
			var err error
			if c, err = parseHeader(rec, line, name, opt); err != nil {
				return Data{}, err
			}
			header = false
			n := strings.Count(rest, "\n") + 1 // rows at most
			if c.hasT {
				d.T = make([]float64, 0, n)
			}
			d.H, d.B, d.Line = make([]float64, 0, n), make([]float64, 0, n), make([]int, 0, n)
			continue
		}
		if err := c.row(&d, rec, line, name); err != nil {
			return Data{}, err
		}
	}
	if header {
		return Data{}, &Error{File: name, Msg: "empty file: want a header row naming the columns H and B"}
	}
	if len(d.H) == 0 {
		return Data{}, &Error{File: name, Msg: "no data rows after the header"}
	}
	return d, nil
}

// readQuoted reads a file with quoted fields through encoding/csv.
func readQuoted(raw string, comma byte, name string, opt Options) (Data, error) {
	cr := csv.NewReader(strings.NewReader(raw))
	cr.Comma = rune(comma)
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
	c, err := parseHeader(header, hl, name, opt)
	if err != nil {
		return Data{}, err
	}
	var d Data
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return Data{}, csvError(name, err)
		}
		line, _ := cr.FieldPos(0)
		if err := c.row(&d, rec, line, name); err != nil {
			return Data{}, err
		}
	}
	if len(d.H) == 0 {
		return Data{}, &Error{File: name, Msg: "no data rows after the header"}
	}
	return d, nil
}

// sniffComma returns ';' when the first line that is not a comment has a
// ';' and no ',', else ','.
func sniffComma(raw string) byte {
	for len(raw) > 0 {
		line := raw
		if i := strings.IndexByte(raw, '\n'); i >= 0 {
			line, raw = raw[:i], raw[i+1:]
		} else {
			raw = ""
		}
		t := strings.TrimSpace(line)
		if len(t) == 0 || t[0] == '#' {
			continue
		}
		if strings.IndexByte(t, ';') >= 0 && strings.IndexByte(t, ',') < 0 {
			return ';'
		}
		return ','
	}
	return ','
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

// UNum is an expanded uncertainty for JSON: two significant digits (GUM
// 7.2.6), null when not available.
type UNum float64

// MarshalJSON implements json.Marshaler.
func (n UNum) MarshalJSON() ([]byte, error) {
	if math.IsNaN(float64(n)) || math.IsInf(float64(n), 0) {
		return []byte("null"), nil
	}
	return []byte(strconv.FormatFloat(float64(n), 'g', 2, 64)), nil
}

// Summary holds the figures `hystd analyze --json` prints, in SI units.
// Negative-branch values are magnitudes averaged over both branches;
// BHmax is the 2nd-quadrant maximum of |B·H|. Each key has a twin ending in
// _u: its expanded uncertainty (k = 2) from noise and the estimator (what
// the samples alone tell). BOffsetT is the B offset removed by centring (0
// when the loop was not centred).
type Summary struct {
	HmaxAM    Num  `json:"hmax_a_m"`
	BmaxT     Num  `json:"bmax_t"`
	BrT       Num  `json:"br_t"`
	HcBAM     Num  `json:"hcb_a_m"`
	HcJAM     Num  `json:"hcj_a_m"`
	MuA       Num  `json:"mu_a"`
	LossJM3   Num  `json:"loss_j_m3"`
	BHmaxJM3  Num  `json:"bhmax_j_m3"`
	HmaxAMU   UNum `json:"hmax_a_m_u"`
	BmaxTU    UNum `json:"bmax_t_u"`
	BrTU      UNum `json:"br_t_u"`
	HcBAMU    UNum `json:"hcb_a_m_u"`
	HcJAMU    UNum `json:"hcj_a_m_u"`
	MuAU      UNum `json:"mu_a_u"`
	LossJM3U  UNum `json:"loss_j_m3_u"`
	BHmaxJM3U UNum `json:"bhmax_j_m3_u"`
	Centred   bool `json:"centred"`
	BOffsetT  Num  `json:"b_offset_t"`
}

// AnalyzeOptions select how a loop is taken.
type AnalyzeOptions struct {
	// NoCentre keeps B as given. By default a symmetric cyclic loop (tips
	// at ±Hmax within 5 % of the H range) is centred: the mean of B at its
	// top and bottom tips is subtracted (REFERENCE §5), since the
	// integrator's start level is arbitrary. Keep B as given for loops with
	// an absolute level (from a demagnetized start).
	NoCentre bool
}

// Result is the analysis of one file: the summary and the figures with
// their budgets (noise and estimator only: analyze knows no geometry or
// instruments).
type Result struct {
	Summary Summary
	Figures []loop.Figure
	Cycles  int
	// Offset is the B offset in T removed by centring; Centred says
	// whether it was.
	Offset  float64
	Centred bool
}

// symmetricFraction is how far (as a fraction of the H range) the top and
// bottom tips may be from symmetric about H = 0 for a loop to be centred.
const symmetricFraction = 0.05

// Analyze computes the figures of d. It needs at least one full cycle
// (tip to tip and back); name is used in errors. d.B is not modified.
func Analyze(d Data, name string, opts ...AnalyzeOptions) (Result, error) {
	var ao AnalyzeOptions
	if len(opts) > 0 {
		ao = opts[0]
	}
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
	b := d.B
	var res Result
	if !ao.NoCentre {
		tips := s.Tips(d.T, d.H, d.B)
		var ht, hb, nt, nb float64
		for _, tp := range tips {
			if tp.Top {
				ht, nt = ht+tp.H, nt+1
			} else {
				hb, nb = hb+tp.H, nb+1
			}
		}
		top, bot, ok := loop.TipLevels(tips)
		if ok && math.Abs(ht/nt+hb/nb) <= symmetricFraction*(s.Hi-s.Lo) {
			res.Offset, res.Centred = (top+bot)/2, true
			b = make([]float64, len(d.B))
			for i, v := range d.B {
				b[i] = v - res.Offset
			}
		}
	}
	fs, err := loop.Figures(d.T, d.H, b, s, loop.Options{})
	if err != nil {
		return Result{}, &Error{File: name, Msg: err.Error()}
	}
	sm := SummaryFrom(func(n string) (float64, float64, bool) {
		for _, f := range fs {
			if f.Name == n {
				return f.Value, f.U, true
			}
		}
		return 0, 0, false
	}, res.Centred, res.Offset)
	res.Summary, res.Figures, res.Cycles = sm, fs, len(cy)
	return res, nil
}

// SummaryFrom fills the analyze JSON keys from a loop's figures, looked up
// by name with figure (value, U, found); a figure not found is NaN. centred
// and offset are the centring applied and the B offset it removed, T.
func SummaryFrom(figure func(name string) (v, u float64, ok bool), centred bool, offset float64) Summary {
	get := func(n string) (Num, UNum) {
		if v, u, ok := figure(n); ok {
			return Num(v), UNum(u)
		}
		return Num(math.NaN()), UNum(math.NaN())
	}
	var sm Summary
	sm.HmaxAM, sm.HmaxAMU = get(loop.FigHmax)
	sm.BmaxT, sm.BmaxTU = get(loop.FigBmax)
	sm.BrT, sm.BrTU = get(loop.FigBr)
	sm.HcBAM, sm.HcBAMU = get(loop.FigHcB)
	sm.HcJAM, sm.HcJAMU = get(loop.FigHcJ)
	sm.MuA, sm.MuAU = get(loop.FigMuA)
	sm.LossJM3, sm.LossJM3U = get(loop.FigLossJM3)
	sm.BHmaxJM3, sm.BHmaxJM3U = get(loop.FigBHmax)
	sm.Centred, sm.BOffsetT = centred, Num(offset)
	return sm
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

// tableRows are the figures of the table, in order, with their labels:
// those analyze prints (calib/loop.Defs with a JSON key).
var tableRows = func() []struct{ name, label string } {
	var rows []struct{ name, label string }
	for _, d := range loop.Defs {
		if d.JSON != "" {
			rows = append(rows, struct{ name, label string }{d.Name, d.Label})
		}
	}
	return rows
}()

// WriteTable writes the figures as an aligned table with units and the
// expanded uncertainty (k = 2) of noise and the estimator, values rounded
// to their uncertainty (GUM 7.2.6).
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
		vs, us := units.Rounded(f.Value, u)
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\n", row.label, vs, us, unit)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if r.Centred {
		if _, err := fmt.Fprintf(w, "B centred: offset %.6g T removed (mean of B at the top and bottom tips).\n", r.Offset); err != nil {
			return err
		}
	}
	_, err := fmt.Fprintf(w, "%d full cycle(s); U covers noise and the estimator only (geometry and instruments are not known here).\n", r.Cycles)
	return err
}
