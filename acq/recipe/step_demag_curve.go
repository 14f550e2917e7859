package recipe

// DemagCurve magnetizes to +Saturate and records the sweep down to To (a
// negative level, through the 2nd quadrant). Each entry of RecoilAt adds a
// recorded recoil loop: saturate again, sweep down to that level, up to
// RecoilTo (default 0) and back.
type DemagCurve struct {
	Saturate Level   `yaml:"saturate"`
	To       Level   `yaml:"to"`
	Rate     Rate    `yaml:"rate"`
	RecoilAt []Level `yaml:"recoil_at"`
	RecoilTo *Level  `yaml:"recoil_to"`
	Sampling `yaml:",inline"`
}

func (d *DemagCurve) check(c *stepCheck, p string) {
	c.positive(p+".saturate", d.Saturate)
	c.level(p+".saturate", d.Saturate, true)
	c.level(p+".to", d.To, true)
	c.rate(p+".rate", d.Rate)
	if !(d.To.Value < 0) {
		c.add(p+".to", "must be negative (the curve runs through the 2nd quadrant), got %s", d.To)
	}
	c.sampling(p, &d.Sampling)
	if d.RecoilTo == nil {
		d.RecoilTo = &Level{0, d.Saturate.Unit}
	} else {
		c.level(p+".recoil_to", *d.RecoilTo, true)
	}
	for j, a := range d.RecoilAt {
		ap := p + ".recoil_at." + itoa(j)
		c.level(ap, a, true)
		if !(a.Value < 0 && a.Value >= d.To.Value) {
			c.add(ap, "must lie on the curve, between to (%s) and 0, got %s", d.To, a)
		}
		if d.RecoilTo.Value <= a.Value || d.RecoilTo.Value > d.Saturate.Value {
			c.add(p+".recoil_to", "must be above every recoil_at (%s) and at most saturate, got %s", a, d.RecoilTo)
		}
	}
}

func (d *DemagCurve) expand(x *expander, src string) {
	rate := x.rt(d.Rate)
	sat, to := x.lv(d.Saturate), x.lv(d.To)
	x.recorded(src, src+".saturate", LoopInfo{Kind: LoopKindDemag, Amplitude: d.Saturate.Value, AmpUnit: d.Saturate.Unit}, rate, d.Sampling, sat, to)
	for j, rc := range d.RecoilAt {
		at := x.lv(rc)
		x.recorded(src, src+".recoil_at."+itoa(j), LoopInfo{Kind: LoopKindRecoil, Amplitude: rc.Value, AmpUnit: rc.Unit}, rate, d.Sampling, sat, at, x.lv(*d.RecoilTo), at)
	}
}

func (d *DemagCurve) unit() (string, bool) { return d.Saturate.Unit, true }
