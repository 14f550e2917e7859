package recipe

import "time"

// Capture modes of a recorded sweep (key capture: of record_loop,
// normal_curve and demag_curve).
const (
	// CapturePolled reads every channel once per setpoint period (default).
	CapturePolled = "polled"
	// CaptureBuffered lets the integrator and the field meter sample on
	// their own time base every buffer_period during the sweep and fetches
	// their buffers after it (their profiles need a buffered section); the
	// supply is still read every setpoint period. See acq/engine.
	CaptureBuffered = "buffered"
)

// Sweep modes of a buffered sweep (key sweep_mode:).
const (
	// SweepSteps sends the supply one setpoint per setpoint period, a
	// staircase (default).
	SweepSteps = "steps"
	// SweepRamp programs the supply to ramp at the sweep's rate from tip to
	// tip on its own (its profile needs a ramp section); the engine reads
	// its current every setpoint period and takes H at each buffered
	// reading's instant from those readings. See acq/engine.
	SweepRamp = "ramp"
)

// DefaultBufferDivisor: without buffer_period, a buffered sweep is sampled
// this many times per setpoint period (of which the engine keeps the twelve
// in the settled part of each step, see acq/engine).
const DefaultBufferDivisor = 30

// MinBufferPeriod and MaxBufferPeriod bound buffer_period.
const (
	MinBufferPeriod = 10 * time.Microsecond
	MaxBufferPeriod = time.Second
)

// Capture is how a Record step's sweep is read.
type Capture struct {
	Buffered bool
	// Period is the buffered sample period (0 when polled).
	Period time.Duration
	// Ramp: the supply ramps continuously during the sweep (sweep_mode:
	// ramp), instead of stepping.
	Ramp bool
}

// capture checks the capture keys of a recorded step's sampling.
func (c *checker) capture(p string, s *Sampling) {
	switch s.SweepMode {
	case "", SweepSteps:
	case SweepRamp:
		if s.Capture != CaptureBuffered {
			c.add(p+".sweep_mode", "ramp only with capture: buffered (a polled sweep reads every channel at each setpoint step)")
		}
	default:
		c.add(p+".sweep_mode", "must be %s or %s, got %q", SweepSteps, SweepRamp, s.SweepMode)
	}
	switch s.Capture {
	case "", CapturePolled:
		if s.BufferPeriod != 0 {
			c.add(p+".buffer_period", "only with capture: buffered")
		}
	case CaptureBuffered:
		if d := s.BufferPeriod.D(); d != 0 && (d < MinBufferPeriod || d > MaxBufferPeriod) {
			c.add(p+".buffer_period", "must be %s to %s, got %s", MinBufferPeriod, fmtDur(MaxBufferPeriod), d)
		}
	default:
		c.add(p+".capture", "must be %s or %s, got %q", CapturePolled, CaptureBuffered, s.Capture)
	}
}

// captureOf is the capture of a recorded step with setpoint period per.
func captureOf(s Sampling, per time.Duration) Capture {
	if s.Capture != CaptureBuffered {
		return Capture{}
	}
	d := s.BufferPeriod.D()
	if d == 0 {
		d = max(per/DefaultBufferDivisor, MinBufferPeriod)
	}
	return Capture{Buffered: true, Period: d, Ramp: s.SweepMode == SweepRamp}
}
