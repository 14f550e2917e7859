package recipe

import (
	"time"

	"hystd/configs"
)

// Sampling says how densely a recorded sweep is sampled: Points per sweep or
// one sample every Interval. One of the two is required.
type Sampling struct {
	Points   int              `yaml:"points"`
	Interval configs.Duration `yaml:"sample_interval"`
	// Hold is the static pre and post hold around the sweep (drift rate);
	// default 2s.
	Hold configs.Duration `yaml:"hold"`
	// Capture and BufferPeriod choose how the sweep's flux and field are
	// read: polled (default) or buffered; see capture.go.
	Capture      string           `yaml:"capture"`
	BufferPeriod configs.Duration `yaml:"buffer_period"`
	// SweepMode is how the supply moves during a buffered sweep: steps
	// (default) or ramp; see capture.go.
	SweepMode string `yaml:"sweep_mode"`
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

// period of a recorded sweep: interval, or the sweep time over the points.
func period(s Sampling, sweep time.Duration) time.Duration {
	if s.Interval > 0 {
		return s.Interval.D()
	}
	p := (sweep / time.Duration(s.Points)).Round(time.Microsecond)
	return max(p, time.Millisecond)
}
