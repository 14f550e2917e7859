package recipe

import (
	"math"
	"regexp"
	"strings"
	"time"

	"hystd/configs"
)

var nameRE = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$`)

// levelAt is one level of the recipe with the path of its key.
type levelAt struct {
	path string
	l    Level
}

type checker struct {
	doc *configs.Doc
	es  configs.Errors
}

func (c *checker) add(path, format string, args ...any) {
	c.es = append(c.es, c.doc.Errorf(path, format, args...))
}

// validate checks what can be checked without a fixture and fills defaults.
func (r *Recipe) validate() error {
	c := &checker{doc: r.doc}
	if r.Kind != Kind {
		c.add("kind", "must be %q, got %q", Kind, r.Kind)
	}
	if !nameRE.MatchString(r.Name) {
		c.add("name", "required: 1–64 letters, digits, '.', '_' or '-', got %q", r.Name)
	}
	switch r.Control {
	case "":
		r.Control = ControlCurrent
	case ControlCurrent, ControlField:
	default:
		c.add("control", "must be %q or %q, got %q", ControlCurrent, ControlField, r.Control)
	}
	if r.FieldGain < 0 || math.IsNaN(r.FieldGain) {
		c.add("field_gain_a_per_a_m", "must be positive, got %g", r.FieldGain)
	}
	if r.IntegratorRange < 0 || r.IntegratorRange > 100 || math.IsNaN(r.IntegratorRange) {
		c.add("integrator_range_wb", "must be a full scale in Wb-turns above 0 and at most 100, got %g", r.IntegratorRange)
	}
	if r.Period != 0 && (r.Period.D() < time.Millisecond || r.Period.D() > 10*time.Second) {
		c.add("period", "must be between 1ms and 10s, got %s", r.Period.D())
	}
	if len(r.Steps) == 0 {
		c.add("steps", "required: a list of steps, each one of %s", stepKinds)
	}
	var levels []levelAt // every level, for the unit check
	var tests []levelAt  // test levels, for the demagnetize check
	lv := func(path string, l Level, test bool) {
		if math.Abs(l.Value) > MaxLevel {
			c.add(path, "%s is beyond the %g %s any level may have", l, MaxLevel, l.Unit)
		}
		levels = append(levels, levelAt{path, l})
		if test {
			tests = append(tests, levelAt{path, Level{math.Abs(l.Value), l.Unit}})
		}
	}
	rate := func(path string, rt Rate) {
		if !(rt.Value > 0) {
			c.add(path, "required: a positive rate such as \"1 kA/m/s\" or \"2 A/s\"")
			return
		}
		if rt.Value < MinRate || rt.Value > MaxRate {
			c.add(path, "%s is outside %g to %g %s/s", rt, MinRate, MaxRate, rt.Unit)
		}
		levels = append(levels, levelAt{path, Level(rt)})
	}
	pos := func(path string, l Level) {
		if !(l.Value > 0) {
			c.add(path, "required: a positive level such as \"1 kA/m\" or \"2 A\"")
		}
	}
	for i := range r.Steps {
		s := &r.Steps[i]
		kind, n := s.kindOf()
		base := "steps." + itoa(i)
		if n != 1 {
			if n == 0 {
				c.add(base, "each step needs exactly one kind: %s", stepKinds)
			} else {
				c.add(base, "one kind per step; this one has %d (write them as separate list items)", n)
			}
			continue
		}
		p := stepPath(i, kind)
		switch {
		case s.Demagnetize != nil:
			d := s.Demagnetize
			pos(p+".from", d.From)
			lv(p+".from", d.From, false)
			rate(p+".rate", d.Rate)
			if d.Ratio == 0 {
				d.Ratio = 0.9
			}
			if d.Ratio < 0.5 || d.Ratio > 0.98 {
				c.add(p+".ratio", "must be between 0.5 and 0.98, got %g", d.Ratio)
			}
			if d.DownTo.Unit == "" {
				d.DownTo = Level{d.From.Value / 100, d.From.Unit}
			} else {
				lv(p+".down_to", d.DownTo, false)
			}
			if d.DownTo.Value <= 0 || d.DownTo.Value >= d.From.Value {
				c.add(p+".down_to", "must be positive and below from (%s), got %s", d.From, d.DownTo)
			}
		case s.Condition != nil:
			d := s.Condition
			pos(p+".amplitude", d.Amplitude)
			lv(p+".amplitude", d.Amplitude, true)
			rate(p+".rate", d.Rate)
			if d.Cycles == 0 {
				d.Cycles = 5
			}
			if d.Cycles < 1 || d.Cycles > 1000 {
				c.add(p+".cycles", "must be 1–1000, got %d", d.Cycles)
			}
		case s.RecordLoop != nil:
			d := s.RecordLoop
			pos(p+".amplitude", d.Amplitude)
			lv(p+".amplitude", d.Amplitude, true)
			rate(p+".rate", d.Rate)
			if d.Cycles == 0 {
				d.Cycles = 1
			}
			if d.Cycles < 1 || d.Cycles > 100 {
				c.add(p+".cycles", "must be 1–100, got %d", d.Cycles)
			}
			c.sampling(p, &d.Sampling)
			if d.Peak != nil {
				c.peak(p+".peak", d.Peak)
			}
		case s.NormalCurve != nil:
			d := s.NormalCurve
			rate(p+".rate", d.Rate)
			if d.Cycles == 0 {
				d.Cycles = 3
			}
			if d.Cycles < 1 || d.Cycles > 1000 {
				c.add(p+".cycles", "must be 1–1000, got %d", d.Cycles)
			}
			c.sampling(p, &d.Sampling)
			switch {
			case len(d.Amplitudes) > 0 && (d.From != nil || d.To != nil || d.Count != 0):
				c.add(p, "give amplitudes, or from, to and count, not both")
			case len(d.Amplitudes) > 0:
				for j, a := range d.Amplitudes {
					ap := p + ".amplitudes." + itoa(j)
					pos(ap, a)
					lv(ap, a, true)
					if j > 0 && a.Value <= d.Amplitudes[j-1].Value {
						c.add(ap, "amplitudes must increase, %s follows %s", a, d.Amplitudes[j-1])
					}
				}
			case d.From != nil && d.To != nil:
				pos(p+".from", *d.From)
				lv(p+".from", *d.From, true)
				lv(p+".to", *d.To, true)
				if d.To.Value <= d.From.Value {
					c.add(p+".to", "must be above from (%s), got %s", d.From, d.To)
				}
				if d.Count < 2 || d.Count > 100 {
					c.add(p+".count", "must be 2–100 amplitudes, got %d", d.Count)
				}
			default:
				c.add(p, "required: amplitudes (a list), or from, to and count")
			}
			// b_at is a field strength H whatever the recipe commands in;
			// within the family's amplitudes when those are fields too
			// (in A, the fixture's N1/l_m is needed: the run then reports
			// a field the tips do not reach instead of its figure).
			lo, hi := math.NaN(), math.NaN()
			if n := len(d.Amplitudes); n > 0 {
				lo, hi = d.Amplitudes[0].Value, d.Amplitudes[n-1].Value
				if d.Amplitudes[0].Unit != UnitApm {
					lo = math.NaN()
				}
			} else if d.From != nil && d.To != nil && d.From.Unit == UnitApm {
				lo, hi = d.From.Value, d.To.Value
			}
			if len(d.BAt) > 20 {
				c.add(p+".b_at", "%d fields, more than the 20 a normal curve may report", len(d.BAt))
			}
			for j, h := range d.BAt {
				hp := p + ".b_at." + itoa(j)
				switch {
				case h.Unit != UnitApm:
					c.add(hp, "B is read at a field strength: write it in A/m, got %s", h)
				case !(h.Value > 0) || h.Value > MaxLevel:
					c.add(hp, "must be a field above 0 and at most %g A/m, got %s", MaxLevel, h)
				case j > 0 && h.Value <= d.BAt[j-1].Value:
					c.add(hp, "fields must increase, %s follows %s", h, d.BAt[j-1])
				case !math.IsNaN(lo) && (h.Value < lo || h.Value > hi):
					c.add(hp, "%s is outside the amplitudes of the normal curve (%s to %s): B there is not measured", h, Level{lo, UnitApm}, Level{hi, UnitApm})
				}
			}
		case s.DemagCurve != nil:
			d := s.DemagCurve
			pos(p+".saturate", d.Saturate)
			lv(p+".saturate", d.Saturate, true)
			lv(p+".to", d.To, true)
			rate(p+".rate", d.Rate)
			if !(d.To.Value < 0) {
				c.add(p+".to", "must be negative (the curve runs through the 2nd quadrant), got %s", d.To)
			}
			c.sampling(p, &d.Sampling)
			if d.RecoilTo == nil {
				d.RecoilTo = &Level{0, d.Saturate.Unit}
			} else {
				lv(p+".recoil_to", *d.RecoilTo, true)
			}
			for j, a := range d.RecoilAt {
				ap := p + ".recoil_at." + itoa(j)
				lv(ap, a, true)
				if !(a.Value < 0 && a.Value >= d.To.Value) {
					c.add(ap, "must lie on the curve, between to (%s) and 0, got %s", d.To, a)
				}
				if d.RecoilTo.Value <= a.Value || d.RecoilTo.Value > d.Saturate.Value {
					c.add(p+".recoil_to", "must be above every recoil_at (%s) and at most saturate, got %s", a, d.RecoilTo)
				}
			}
		case s.DriftHold != nil:
			d := s.DriftHold
			if d.Duration.D() < 100*time.Millisecond || d.Duration.D() > MaxDriftHold {
				c.add(p+".duration", "required: 100ms to %s, got %s", fmtDur(MaxDriftHold), d.Duration.D())
			}
			if d.At != nil {
				lv(p+".at", *d.At, true)
				if d.At.Value != 0 {
					if d.Rate == nil {
						c.add(p+".rate", "required to reach at: %s", d.At)
					} else {
						rate(p+".rate", *d.Rate)
					}
				}
			}
		case s.Wait != nil:
			if s.Wait.Duration.D() <= 0 {
				c.add(p+".duration", "required: a positive duration such as \"30s\"")
			} else if s.Wait.Duration.D() > MaxWait {
				c.add(p+".duration", "%s is longer than the %s a wait may last", s.Wait.Duration.D(), fmtDur(MaxWait))
			}
		}
	}
	// One unit for the whole recipe, and the one control: field needs.
	unit := ""
	for _, l := range levels {
		if l.l.Unit == "" {
			continue
		}
		if unit == "" {
			unit = l.l.Unit
			if r.Control == ControlField && unit != UnitApm {
				c.add(l.path, "control: field sets H: write levels and rates in A/m, got %s", l.l.Unit)
			}
			continue
		}
		if l.l.Unit != unit {
			c.add(l.path, "unit %s differs from %s used before (%s); use one unit for the whole recipe", l.l.Unit, unit, levels[0].path)
		}
	}
	// Demagnetization starts above the highest test level.
	for i := range r.Steps {
		d := r.Steps[i].Demagnetize
		if d == nil || d.From.Unit != unit {
			continue
		}
		for _, t := range tests {
			if t.l.Value >= d.From.Value {
				c.add(stepPath(i, "demagnetize")+".from", "%s does not start above the highest test level, %s at %s", d.From, t.l, t.path)
				break
			}
		}
	}
	return c.es.Err()
}

// MaxPeak bounds a peak target: above every material's saturation
// polarization (about 2.4 T for iron–cobalt, handbook value from memory).
const MaxPeak = 5.0

// MaxTries bounds the tries of a peak search.
const MaxTries = 20

// peak checks a peak target and fills its defaults.
func (c *checker) peak(p string, k *Peak) {
	var target *Induction
	switch {
	case k.B != nil && k.J != nil:
		c.add(p, "give b or j (the peak to aim at), not both")
		return
	case k.B != nil:
		target = k.B
		p += ".b"
	case k.J != nil:
		target = k.J
		p += ".j"
	default:
		c.add(p, "required: b or j, the peak induction to aim at, e.g. \"b: 1.5 T\"")
		return
	}
	if !(*target > 0) || *target > MaxPeak {
		c.add(p, "must be above 0 T and at most %g T, got %s", MaxPeak, *target)
		return
	}
	tp := strings.TrimSuffix(strings.TrimSuffix(p, ".b"), ".j")
	if k.Tolerance == 0 {
		k.Tolerance = *target / 100
	}
	if !(k.Tolerance > 0) || k.Tolerance > *target/10 {
		c.add(tp+".tolerance", "must be above 0 T and at most a tenth of the target (%s), got %s", *target/10, k.Tolerance)
	}
	if k.Tries == 0 {
		k.Tries = 8
	}
	if k.Tries < 1 || k.Tries > MaxTries {
		c.add(tp+".tries", "must be 1–%d, got %d", MaxTries, k.Tries)
	}
}

func (c *checker) sampling(p string, s *Sampling) {
	switch {
	case s.Points != 0 && s.Interval != 0:
		c.add(p+".points", "give points or sample_interval, not both")
	case s.Points != 0:
		if s.Points < 10 || s.Points > MaxPoints {
			c.add(p+".points", "must be 10 to %d per sweep, got %d", MaxPoints, s.Points)
		}
	case s.Interval != 0:
		if s.Interval.D() < time.Millisecond || s.Interval.D() > MaxSampleInterval {
			c.add(p+".sample_interval", "must be 1ms to %s, got %s", fmtDur(MaxSampleInterval), s.Interval.D())
		}
	default:
		c.add(p, "required: points (per sweep) or sample_interval")
	}
	if s.Hold == 0 {
		s.Hold = configs.Duration(DefaultHold)
	}
	if s.Hold.D() < 100*time.Millisecond || s.Hold.D() > MaxHold {
		c.add(p+".hold", "must be 100ms to %s (the drift rate is measured during it), got %s", fmtDur(MaxHold), s.Hold.D())
	}
	c.capture(p, s)
}

// fmtDur prints a bound as a duration a recipe can use ("168h", "1m").
func fmtDur(d time.Duration) string {
	return strings.TrimSuffix(strings.TrimSuffix(d.String(), "0s"), "0m")
}

func itoa(i int) string {
	if i < 10 {
		return string(rune('0' + i))
	}
	return itoa(i/10) + string(rune('0'+i%10))
}
