package recipe

import "math"

// NormalCurve records one loop at each amplitude, each after Cycles
// conditioning cycles; the tips form the normal (commutation) curve. Give
// Amplitudes, or From, To and Count for geometric spacing.
type NormalCurve struct {
	Amplitudes []Level `yaml:"amplitudes"`
	From       *Level  `yaml:"from"`
	To         *Level  `yaml:"to"`
	Count      int     `yaml:"count"`
	Cycles     int     `yaml:"cycles"` // conditioning cycles per amplitude, default 3
	Rate       Rate    `yaml:"rate"`
	// BAt lists fields (A/m) at which B is read on the normal curve and
	// reported as figures b_at_<H>_a_m (electrical steel is quoted at 800,
	// 2500 and 5000 A/m, common practice); each must lie within the
	// family's amplitudes.
	BAt      []Level `yaml:"b_at"`
	Sampling `yaml:",inline"`
}

func (d *NormalCurve) check(c *stepCheck, p string) {
	c.rate(p+".rate", d.Rate)
	c.cycles(p+".cycles", &d.Cycles, 3, 1000)
	c.sampling(p, &d.Sampling)
	d.checkAmplitudes(c, p)
	d.checkBAt(c, p)
}

// checkAmplitudes checks the family's amplitudes: a list, or from, to and count.
func (d *NormalCurve) checkAmplitudes(c *stepCheck, p string) {
	switch {
	case len(d.Amplitudes) > 0 && (d.From != nil || d.To != nil || d.Count != 0):
		c.add(p, "give amplitudes, or from, to and count, not both")
	case len(d.Amplitudes) > 0:
		for j, a := range d.Amplitudes {
			ap := p + ".amplitudes." + itoa(j)
			c.positive(ap, a)
			c.level(ap, a, true)
			if j > 0 && a.Value <= d.Amplitudes[j-1].Value {
				c.add(ap, "amplitudes must increase, %s follows %s", a, d.Amplitudes[j-1])
			}
		}
	case d.From != nil && d.To != nil:
		c.positive(p+".from", *d.From)
		c.level(p+".from", *d.From, true)
		c.level(p+".to", *d.To, true)
		if d.To.Value <= d.From.Value {
			c.add(p+".to", "must be above from (%s), got %s", d.From, d.To)
		}
		if d.Count < 2 || d.Count > 100 {
			c.add(p+".count", "must be 2–100 amplitudes, got %d", d.Count)
		}
	default:
		c.add(p, "required: amplitudes (a list), or from, to and count")
	}
}

// checkBAt checks the fields B is read at. b_at is a field strength H
// whatever the recipe commands in; within the family's amplitudes when
// those are fields too (in A, the fixture's N1/l_m is needed: the run then
// reports a field the tips do not reach instead of its figure).
func (d *NormalCurve) checkBAt(c *stepCheck, p string) {
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
}

func (d *NormalCurve) expand(x *expander, src string) {
	amps := d.Amplitudes
	if len(amps) == 0 {
		q := math.Pow(d.To.Value/d.From.Value, 1/float64(d.Count-1))
		for k := range d.Count {
			amps = append(amps, Level{d.From.Value * math.Pow(q, float64(k)), d.From.Unit})
		}
	}
	var bAt []float64
	for _, h := range d.BAt {
		bAt = append(bAt, h.Value)
	}
	for j, a := range amps {
		path := src + ".amplitudes." + itoa(j)
		if len(d.Amplitudes) == 0 {
			path = src + ".to"
		}
		x.condition(src, path, x.lv(a), x.rt(d.Rate), d.Cycles)
		info := LoopInfo{Kind: LoopKindNormal, Amplitude: a.Value, AmpUnit: a.Unit, Family: src, Member: j + 1, Of: len(amps), BAt: bAt}
		x.recorded(src, path, info, x.rt(d.Rate), d.Sampling, x.lv(a), -x.lv(a), x.lv(a))
	}
}

func (d *NormalCurve) unit() (string, bool) { return d.Rate.Unit, true }
