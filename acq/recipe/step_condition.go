package recipe

// Condition cycles ±Amplitude Cycles times, recording nothing.
type Condition struct {
	Amplitude Level `yaml:"amplitude"`
	Cycles    int   `yaml:"cycles"` // default 5
	Rate      Rate  `yaml:"rate"`
}

func (d *Condition) check(c *stepCheck, p string) {
	c.amplitude(p+".amplitude", d.Amplitude)
	c.rate(p+".rate", d.Rate)
	c.cycles(p+".cycles", &d.Cycles, 5, 1000)
}

func (d *Condition) expand(x *expander, src string) {
	x.condition(src, src+".amplitude", x.lv(d.Amplitude), x.rt(d.Rate), d.Cycles)
}

func (d *Condition) unit() (string, bool) { return d.Amplitude.Unit, true }
