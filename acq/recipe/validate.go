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

// stepCheck is the checker of the steps: it also collects every level, for
// the one-unit check, and every test level, for the demagnetize check.
type stepCheck struct {
	*checker
	levels []levelAt
	tests  []levelAt
}

// validate checks what can be checked without a fixture and fills defaults.
func (r *Recipe) validate() error {
	c := &stepCheck{checker: &checker{doc: r.doc}}
	r.checkHead(c.checker)
	for i := range r.Steps {
		key, b, n := r.Steps[i].kind()
		base := "steps." + itoa(i)
		switch n {
		case 1:
			b.check(c, stepPath(i, key))
		case 0:
			c.add(base, "each step needs exactly one kind: %s", stepKinds)
		default:
			c.add(base, "one kind per step; this one has %d (write them as separate list items)", n)
		}
	}
	unit := c.oneUnit(r.Control)
	checkDemagStart(c, r.Steps, unit)
	return c.es.Err()
}

// checkHead checks the keys above the steps and fills their defaults.
func (r *Recipe) checkHead(c *checker) {
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
}

// level checks a level's bound and keeps it for the unit check; a test
// level (one the specimen is measured at) also for the demagnetize check.
func (c *stepCheck) level(path string, l Level, test bool) {
	if math.Abs(l.Value) > MaxLevel {
		c.add(path, "%s is beyond the %g %s any level may have", l, MaxLevel, l.Unit)
	}
	c.levels = append(c.levels, levelAt{path, l})
	if test {
		c.tests = append(c.tests, levelAt{path, Level{math.Abs(l.Value), l.Unit}})
	}
}

// rate checks a rate and keeps it for the unit check.
func (c *stepCheck) rate(path string, rt Rate) {
	if !(rt.Value > 0) {
		c.add(path, "required: a positive rate such as \"1 kA/m/s\" or \"2 A/s\"")
		return
	}
	if rt.Value < MinRate || rt.Value > MaxRate {
		c.add(path, "%s is outside %g to %g %s/s", rt, MinRate, MaxRate, rt.Unit)
	}
	c.levels = append(c.levels, levelAt{path, Level(rt)})
}

// amplitude checks a test level that must be positive.
func (c *stepCheck) amplitude(path string, l Level) {
	c.positive(path, l)
	c.level(path, l, true)
}

// cycles fills a count of cycles left out with def and checks it is 1 to max.
func (c *checker) cycles(path string, n *int, def, max int) {
	if *n == 0 {
		*n = def
	}
	if *n < 1 || *n > max {
		c.add(path, "must be 1–%d, got %d", max, *n)
	}
}

// positive refuses a level that is not above zero.
func (c *stepCheck) positive(path string, l Level) {
	if !(l.Value > 0) {
		c.add(path, "required: a positive level such as \"1 kA/m\" or \"2 A\"")
	}
}

// oneUnit checks that the recipe uses one unit, the one control: field
// needs, and returns it.
func (c *stepCheck) oneUnit(control string) string {
	unit := ""
	for _, l := range c.levels {
		if l.l.Unit == "" {
			continue
		}
		if unit == "" {
			unit = l.l.Unit
			if control == ControlField && unit != UnitApm {
				c.add(l.path, "control: field sets H: write levels and rates in A/m, got %s", l.l.Unit)
			}
			continue
		}
		if l.l.Unit != unit {
			c.add(l.path, "unit %s differs from %s used before (%s); use one unit for the whole recipe", l.l.Unit, unit, c.levels[0].path)
		}
	}
	return unit
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
