package recipe

// Condition cycles ±Amplitude Cycles times, recording nothing.
type Condition struct {
	Amplitude Level `yaml:"amplitude"`
	Cycles    int   `yaml:"cycles"` // default 5
	Rate      Rate  `yaml:"rate"`
}

func (d *Condition) check(c *stepCheck, p string) {
	c.positive(p+".amplitude", d.Amplitude)
	c.level(p+".amplitude", d.Amplitude, true)
	c.rate(p+".rate", d.Rate)
	if d.Cycles == 0 {
		d.Cycles = 5
	}
	if d.Cycles < 1 || d.Cycles > 1000 {
		c.add(p+".cycles", "must be 1–1000, got %d", d.Cycles)
	}
}

func (d *Condition) expand(x *expander, src string) {
	x.condition(src, src+".amplitude", x.lv(d.Amplitude), x.rt(d.Rate), d.Cycles)
}

func (d *Condition) unit() (string, bool) { return d.Amplitude.Unit, true }
