package recipe

import "math"

// Demagnetize reverses the level with an amplitude that shrinks by Ratio at
// each reversal, from From down to below DownTo, then returns to zero.
type Demagnetize struct {
	From   Level   `yaml:"from"`    // first amplitude; must exceed every test level of the recipe
	Ratio  float64 `yaml:"ratio"`   // amplitude of each reversal over the previous one, 0.5–0.98; default 0.9
	DownTo Level   `yaml:"down_to"` // stop below this amplitude; default From/100
	Rate   Rate    `yaml:"rate"`
}

func (d *Demagnetize) check(c *stepCheck, p string) {
	c.positive(p+".from", d.From)
	c.level(p+".from", d.From, false)
	c.rate(p+".rate", d.Rate)
	if d.Ratio == 0 {
		d.Ratio = 0.9
	}
	if d.Ratio < 0.5 || d.Ratio > 0.98 {
		c.add(p+".ratio", "must be between 0.5 and 0.98, got %g", d.Ratio)
	}
	if d.DownTo.Unit == "" {
		d.DownTo = Level{d.From.Value / 100, d.From.Unit}
	} else {
		c.level(p+".down_to", d.DownTo, false)
	}
	if d.DownTo.Value <= 0 || d.DownTo.Value >= d.From.Value {
		c.add(p+".down_to", "must be positive and below from (%s), got %s", d.From, d.DownTo)
	}
}

// checkDemagStart refuses a demagnetization that does not start above the
// highest test level of the recipe (levels in unit, the recipe's).
func checkDemagStart(c *stepCheck, steps []StepSpec, unit string) {
	for i := range steps {
		d := steps[i].Demagnetize
		if d == nil || d.From.Unit != unit {
			continue
		}
		for _, t := range c.tests {
			if t.l.Value >= d.From.Value {
				c.add(stepPath(i, "demagnetize")+".from", "%s does not start above the highest test level, %s at %s", d.From, t.l, t.path)
				break
			}
		}
	}
}

func (d *Demagnetize) expand(x *expander, src string) {
	rate := x.rt(d.Rate)
	if n := math.Log(d.DownTo.Value/d.From.Value)/math.Log(d.Ratio) + 1; !(n <= MaxReversals) {
		x.refuse(src+".down_to", "step %s: from %s down to %s at ratio %g takes %.3g reversals, more than %d; raise down_to or lower ratio",
			src, d.From, d.DownTo, d.Ratio, n, MaxReversals)
		return
	}
	var levels []float64
	for a, sign := x.lv(d.From), 1.0; a >= x.lv(d.DownTo); a, sign = a*d.Ratio, -sign {
		levels = append(levels, sign*a)
	}
	levels = append(levels, 0)
	x.push(Step{Source: src, Kind: KindDemagnetize, Period: x.r.PeriodOr(),
		Segments: x.program(x.level, rate, "", 2*x.r.PeriodOr(), levels...)}, src+".from", rate)
}

func (d *Demagnetize) unit() (string, bool) { return d.From.Unit, true }
