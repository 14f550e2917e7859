package recipe

import (
	"time"

	"hystd/acq/record"
	"hystd/configs"
)

// DriftHold holds At (default 0) for Duration while the integrator drift is measured.
type DriftHold struct {
	At       *Level           `yaml:"at"`
	Duration configs.Duration `yaml:"duration"`
	Rate     *Rate            `yaml:"rate"` // to reach At; required when At is not 0
}

func (d *DriftHold) check(c *stepCheck, p string) {
	if d.Duration.D() < 100*time.Millisecond || d.Duration.D() > MaxDriftHold {
		c.add(p+".duration", "required: 100ms to %s, got %s", fmtDur(MaxDriftHold), d.Duration.D())
	}
	if d.At == nil {
		return
	}
	c.level(p+".at", *d.At, true)
	if d.At.Value != 0 {
		if d.Rate == nil {
			c.add(p+".rate", "required to reach at: %s", d.At)
		} else {
			c.rate(p+".rate", *d.Rate)
		}
	}
}

func (d *DriftHold) expand(x *expander, src string) {
	at, rate := 0.0, x.lastRate
	if d.At != nil {
		at = x.lv(*d.At)
	}
	if d.Rate != nil {
		rate = x.rt(*d.Rate)
	}
	if at != x.level && !(rate > 0) {
		x.c.add(src+".rate", "required: no earlier step gives a rate to reach the hold level")
		return
	}
	segs := x.program(x.level, rate, "", 2*x.r.PeriodOr(), at)
	segs = append(segs, Segment{To: at, Dur: d.Duration.D(), Phase: record.PreHold})
	x.push(Step{Source: src, Kind: KindDriftHold, Period: x.r.PeriodOr(), Segments: segs}, src, rate)
}

func (d *DriftHold) unit() (string, bool) {
	if d.At == nil {
		return "", false
	}
	return d.At.Unit, true
}
