package grade

import (
	"fmt"
	"math"
	"regexp"
	"strings"

	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/configs"
)

// Kind is the value of `kind:` in a grade file.
const Kind = "grade"

// Rule names.
const (
	RuleGuarded = "guarded-U"
	RuleSimple  = "simple"
)

// Rules lists the decision rules by name with what they mean (for reports).
var Rules = map[string]string{
	RuleGuarded: "guarded acceptance, guard band w = U (k = 2): pass only when value ± U lies within the limits, " +
		"fail only when value ± U lies wholly outside, undecided when it touches or straddles a limit (ILAC-G8, ISO 14253-1)",
	RuleSimple: "simple acceptance, w = 0: the value alone is compared with the limits; near a limit the risk of a " +
		"wrong decision is up to 50 %",
}

// DefaultTolerance is the relative tolerance of an amplitude condition.
const DefaultTolerance = 0.05

// Grade is a material grade: limits on figures and when each applies.
type Grade struct {
	Kind        string `yaml:"kind"`
	Name        string `yaml:"name"`
	Description string `yaml:"description"`
	// Rule is the decision rule: "guarded-U" (default) or "simple".
	Rule   string  `yaml:"decision_rule"`
	Limits []Limit `yaml:"limits"`
}

// Limit bounds one figure (in its SI unit, as stored) under conditions.
type Limit struct {
	Figure string   `yaml:"figure"`
	Min    *float64 `yaml:"min"`
	Max    *float64 `yaml:"max"`
	Unit   string   `yaml:"unit"` // optional; when given it must be the figure's stored unit
	When   When     `yaml:"when"`
}

// When are the conditions under which a limit applies; empty fields match anything.
type When struct {
	// LoopKind is the loop's kind ("loop", "normal-curve", "demag-curve", "recoil").
	LoopKind string `yaml:"loop_kind"`
	// HAmplitude is the loop's peak field in A/m (measured Hmax), within Tolerance.
	HAmplitude float64 `yaml:"h_amplitude_a_m"`
	// BPeak is the loop's peak flux density in T (measured Bmax), within Tolerance.
	BPeak float64 `yaml:"b_peak_t"`
	// Tolerance is relative, e.g. 0.05 for ±5 %; 0 means DefaultTolerance.
	Tolerance float64 `yaml:"tolerance"`
	// TempMinC and TempMaxC bound the specimen temperature (mean of the
	// sweep's readings); a loop without temperature readings is undecided.
	TempMinC *float64 `yaml:"temp_min_c"`
	TempMaxC *float64 `yaml:"temp_max_c"`
}

// Parse decodes and validates a grade document; file names it in errors.
func Parse(file string, data []byte) (Grade, error) {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return Grade{}, err
	}
	return FromDoc(doc)
}

// knownFigures are the figures a limit may name, with their stored units
// (calib/loop.Defs).
var knownFigures = func() map[string]string {
	m := map[string]string{}
	for _, d := range loop.Defs {
		m[d.Name] = d.Unit
	}
	return m
}()

// bAtRE matches the names of B read on the normal curve at a field,
// b_at_<H>_a_m (calib/loop.BAtName: "p" for a decimal point).
var bAtRE = regexp.MustCompile(`^b_at_[0-9]+(p[0-9]+)?_a_m$`)

func unitOf(name string) string { u, _ := figureUnit(name); return u }

// figureUnit returns the stored unit of a figure a limit may name.
func figureUnit(name string) (string, bool) {
	if u, ok := knownFigures[name]; ok {
		return u, true
	}
	if bAtRE.MatchString(name) {
		return "T", true
	}
	return "", false
}

// FromDoc decodes and validates a parsed grade document.
func FromDoc(doc *configs.Doc) (Grade, error) {
	var g Grade
	if err := doc.Decode(&g); err != nil {
		return Grade{}, err
	}
	var es configs.Errors
	add := func(path, f string, a ...any) { es = append(es, doc.Errorf(path, f, a...)) }
	if g.Kind != Kind {
		add("kind", "want %q, got %q", Kind, g.Kind)
	}
	if strings.TrimSpace(g.Name) == "" {
		add("name", "required")
	}
	switch g.Rule {
	case "":
		g.Rule = RuleGuarded
	case RuleGuarded, RuleSimple:
	default:
		add("decision_rule", "%q is not one of [%s %s]", g.Rule, RuleGuarded, RuleSimple)
	}
	if len(g.Limits) == 0 {
		add("limits", "required: at least one limit")
	}
	for i, l := range g.Limits {
		l.check(add, fmt.Sprintf("limits.%d", i))
	}
	if len(es) > 0 {
		return Grade{}, es
	}
	return g, nil
}

// adder reports one problem of a grade at the key at path.
type adder = func(path, f string, a ...any)

// check checks one limit at key p: its figure and unit, its bounds and
// its conditions.
func (l Limit) check(add adder, p string) {
	unit, ok := figureUnit(l.Figure)
	switch {
	case l.Figure == "":
		add(p+".figure", "required")
	case !ok:
		add(p+".figure", "unknown figure %q", l.Figure)
	case l.Unit != "" && l.Unit != unit:
		add(p+".unit", "%s is stored in %q, not %q (limits are in the stored SI unit)", l.Figure, unit, l.Unit)
	}
	if l.Min == nil && l.Max == nil {
		add(p, "needs min, max or both")
	}
	checkFinite(add, p+".min", l.Min)
	checkFinite(add, p+".max", l.Max)
	if l.Min != nil && l.Max != nil && *l.Min > *l.Max {
		add(p+".min", "min %g is above max %g", *l.Min, *l.Max)
	}
	l.When.check(add, p+".when")
}

// check checks the conditions of a limit at key p.
func (w When) check(add adder, p string) {
	if w.HAmplitude < 0 || math.IsInf(w.HAmplitude, 0) || math.IsNaN(w.HAmplitude) {
		add(p+".h_amplitude_a_m", "must be a positive number")
	}
	if w.BPeak < 0 || math.IsInf(w.BPeak, 0) || math.IsNaN(w.BPeak) {
		add(p+".b_peak_t", "must be a positive number")
	}
	if !(w.Tolerance >= 0 && w.Tolerance < 1) {
		add(p+".tolerance", "must be a fraction in [0, 1), e.g. 0.05")
	}
	checkFinite(add, p+".temp_min_c", w.TempMinC)
	checkFinite(add, p+".temp_max_c", w.TempMaxC)
	if w.TempMinC != nil && w.TempMaxC != nil && *w.TempMinC > *w.TempMaxC {
		add(p+".temp_min_c", "above temp_max_c")
	}
	switch w.LoopKind {
	case "", "loop", "normal-curve", "demag-curve", "recoil":
	default:
		add(p+".loop_kind", "%q is not one of [loop normal-curve demag-curve recoil]", w.LoopKind)
	}
}

// checkFinite refuses a NaN or infinite number given at path.
func checkFinite(add adder, path string, v *float64) {
	if v != nil && (math.IsNaN(*v) || math.IsInf(*v, 0)) {
		add(path, "must be a finite number")
	}
}

// Decide applies the decision rule to value ± u against the limits lo and hi
// (NaN: no such limit). It also returns why the outcome is undecided, when it is.
func Decide(rule string, value, u, lo, hi float64) (record.Outcome, string) {
	if math.IsNaN(value) {
		return record.Undecided, "no value"
	}
	w := 0.0
	if rule != RuleSimple {
		if math.IsNaN(u) || u < 0 {
			return record.Undecided, "U not evaluated"
		}
		w = u
	}
	if (!math.IsNaN(lo) && value+w < lo) || (!math.IsNaN(hi) && value-w > hi) {
		return record.Fail, ""
	}
	if (math.IsNaN(lo) || value-w >= lo) && (math.IsNaN(hi) || value+w <= hi) {
		return record.Pass, ""
	}
	return record.Undecided, "value ± U straddles a limit"
}

// Judge returns the verdicts of loop l under every limit of g whose
// conditions it meets, with the grade's own rule, or with rule when not "".
func (g Grade) Judge(l record.Loop, rule string) []record.Verdict {
	if rule == "" {
		rule = g.Rule
	}
	if rule == "" {
		rule = RuleGuarded
	}
	figs := map[string]record.Figure{}
	for _, f := range l.Figures {
		figs[f.Name] = f
	}
	var out []record.Verdict
	temp, haveTemp := meanTemp(l.Raw)
	for _, lim := range g.Limits {
		note, ok := lim.When.matches(l, figs)
		if !ok {
			continue
		}
		v := record.Verdict{Grade: g.Name, Figure: lim.Figure, Value: math.NaN(), U: math.NaN(),
			Min: math.NaN(), Max: math.NaN(), Unit: unitOf(lim.Figure), Rule: rule}
		if lim.Min != nil {
			v.Min = *lim.Min
		}
		if lim.Max != nil {
			v.Max = *lim.Max
		}
		if f, ok := figs[lim.Figure]; ok {
			v.Value, v.U = f.Value, f.U
		}
		why := ""
		if lim.When.TempMinC != nil || lim.When.TempMaxC != nil {
			switch {
			case !haveTemp:
				why = "temperature not measured"
			case lim.When.TempMinC != nil && temp < *lim.When.TempMinC, lim.When.TempMaxC != nil && temp > *lim.When.TempMaxC:
				continue // outside the temperature range: the limit does not apply
			default:
				note = append(note, fmt.Sprintf("%.1f °C", temp))
			}
		}
		if why == "" {
			v.Outcome, why = Decide(rule, v.Value, v.U, v.Min, v.Max)
		} else {
			v.Outcome = record.Undecided
		}
		if why != "" {
			note = append(note, why)
		}
		v.Note = strings.Join(note, "; ")
		out = append(out, v)
	}
	return out
}

func (w When) matches(l record.Loop, figs map[string]record.Figure) ([]string, bool) {
	var note []string
	if w.LoopKind != "" {
		if l.Kind != w.LoopKind {
			return nil, false
		}
		note = append(note, l.Kind)
	}
	tol := w.Tolerance
	if tol == 0 {
		tol = DefaultTolerance
	}
	if w.HAmplitude > 0 {
		h := math.NaN()
		if f, ok := figs[loop.FigHmax]; ok {
			h = f.Value
		} else if l.AmpUnit == "A/m" {
			h = l.Amplitude
		}
		if !(math.Abs(h-w.HAmplitude) <= tol*w.HAmplitude) {
			return nil, false
		}
		note = append(note, fmt.Sprintf("Hmax %.4g A/m within %g %% of %g A/m", h, 100*tol, w.HAmplitude))
	}
	if w.BPeak > 0 {
		f, ok := figs[loop.FigBmax]
		if !ok || !(math.Abs(f.Value-w.BPeak) <= tol*w.BPeak) {
			return nil, false
		}
		note = append(note, fmt.Sprintf("Bmax %.4g T within %g %% of %g T", f.Value, 100*tol, w.BPeak))
	}
	return note, true
}

// meanTemp is the mean of the sweep's temperature readings that are numbers.
func meanTemp(raw []record.Sample) (float64, bool) {
	var s float64
	n := 0
	for _, r := range raw {
		if r.Phase == record.Sweep && !math.IsNaN(r.TempC) && !math.IsInf(r.TempC, 0) {
			s += r.TempC
			n++
		}
	}
	if n == 0 {
		return 0, false
	}
	return s / float64(n), true
}
