package recipe

import "hystd/configs"

// Wait holds the present level for Duration.
type Wait struct {
	Duration configs.Duration `yaml:"duration"`
}

func (d *Wait) check(c *stepCheck, p string) {
	if d.Duration.D() <= 0 {
		c.add(p+".duration", "required: a positive duration such as \"30s\"")
	} else if d.Duration.D() > MaxWait {
		c.add(p+".duration", "%s is longer than the %s a wait may last", d.Duration.D(), fmtDur(MaxWait))
	}
}

func (d *Wait) expand(x *expander, src string) {
	x.push(Step{Source: src, Kind: KindWait, Period: x.r.PeriodOr(),
		Segments: []Segment{{To: x.level, Dur: d.Duration.D()}}}, "", x.lastRate)
}

func (d *Wait) unit() (string, bool) { return "", false }
