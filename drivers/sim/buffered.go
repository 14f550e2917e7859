package sim

import (
	"math"
	"strconv"
	"strings"

	"hystd/drivers/instr"
	"hystd/drivers/profile"
	"hystd/drivers/scpi"
)

// Timed acquisition of the simulated integrator and field meter (a
// profile's buffered section). Each instrument keeps its own time base:
//
//	instrument seconds = clockOffset + (1 + clockDrift)·(bench seconds since start)
//
// with a small rate error of its own (clockDrift, within the profiles'
// stated 100 ppm) and an arbitrary offset. After the trigger it takes sample
// k at latency + delay + k·period on that clock, i.e. at bench time
// t_trigger + (latency + delay + k·period)/(1 + clockDrift), where latency
// is its own trigger latency (triggerLatency, which its profile states as
// buffered.trigger_latency) and delay the programmed one; reading its physics
// interpolated linearly between the two physics steps around that instant,
// with its own noise. The engine does not know clockDrift: it estimates
// the rate from two clock readings (buffered.clock), as on a real bench.
var clockDrift = map[string]float64{instr.RoleIntegrator: 40e-6, instr.RoleFieldMeter: -25e-6}

// triggerLatency is each instrument's own time, in seconds on its clock,
// between receiving the trigger and starting the programmed delay: what a
// manual states as trigger latency. The shipped sim profiles state the
// same values (configs/instruments/sim-*.yaml, buffered.trigger_latency).
var triggerLatency = map[string]float64{instr.RoleIntegrator: 2.0e-3, instr.RoleFieldMeter: 3.5e-3}

// clockOffset is where an instrument's clock stood when the bench started.
func clockOffset(serial int) float64 { return 3600 + 97.25*float64(serial) }

// Fault kinds of a timed acquisition (integrator, field meter).
const (
	// FaultNoTrigger: the next trigger is lost; the acquisition never starts.
	FaultNoTrigger = "no_trigger"
	// FaultShortBuffer: the next buffer fetched lacks its last quarter
	// (the block's header says so: the count is wrong, not the framing).
	FaultShortBuffer = "short_buffer"
	// FaultLateTrigger: the next trigger takes effect Delay after its
	// command arrives, as on a busy instrument or behind a serial adapter
	// that holds bytes back; the host's stamp of the trigger's write does
	// not show it. An instrument whose profile has buffered.trigger_time
	// reports the instant on its clock all the same.
	FaultLateTrigger = "late_trigger"
)

const bufPrefix = "buffered."

// acquisition is the timed-acquisition state of one instrument.
type acquisition struct {
	period, delay float64 // s, instrument clock
	count         int
	armed         bool
	triggered     bool
	trigAt        float64 // bench seconds since start
	values        []float64
	prevT         float64 // bench seconds of prev
	prev          float64 // noise-free reading at prevT
	lostTriggers  int     // pending no_trigger faults
	shortBuffers  int     // pending short_buffer faults
	lateBy        float64 // s: a pending late_trigger fault's lag
}

// bufferedMatchers recognises the commands of a profile's buffered section.
func bufferedMatchers(p profile.Profile) []matcher {
	b := p.Buffered
	if b == nil {
		return nil
	}
	ops := map[string]profile.Operation{
		"trigger": b.Trigger, "period": b.Period, "count": b.Count, "delay": b.Delay, "arm": b.Arm,
		"done": b.Done, "clock": b.Clock, "fetch": {Query: b.Fetch.Query}, "trigger_time": b.TriggerTime,
	}
	var ms []matcher
	for name, op := range ops {
		tmpl, query := op.Set, false
		if op.Query != "" {
			tmpl, query = op.Query, true
		}
		if tmpl == "" {
			continue
		}
		m := matcher{name: bufPrefix + name, op: op, query: query}
		m.match(tmpl)
		ms = append(ms, m)
	}
	return ms
}

// reading is the instrument's noise-free reading of its physics now, or
// with the noise of one draw; ok is false for a field beyond range.
func (b *Bench) reading(in *instrument, noise float64) (float64, bool) {
	if in.role == instr.RoleIntegrator {
		return b.rig.ReadFlux(noise), true
	}
	return b.rig.ReadField(noise)
}

func (b *Bench) instClock(in *instrument) float64 {
	return clockOffset(in.serial) + (1+clockDrift[in.role])*b.simT.Seconds()
}

// bufferedSet runs a setting of the buffered section; b.mu is held.
func (b *Bench) bufferedSet(in *instrument, name string, v value) *scpiError {
	a := &in.acq
	switch strings.TrimPrefix(name, bufPrefix) {
	case "trigger":
	case "period":
		if !(v.Num > 0) {
			return &errOutOfRange
		}
		a.period = v.Num
	case "count":
		if v.Num < 1 || v.Num != math.Trunc(v.Num) {
			return &errOutOfRange
		}
		a.count = int(v.Num)
	case "delay":
		if v.Num < 0 {
			return &errOutOfRange
		}
		a.delay = v.Num
	case "arm":
		if a.count == 0 || a.period == 0 {
			return &errSettings
		}
		a.armed, a.triggered, a.values = true, false, make([]float64, 0, a.count)
	default:
		return &errUndefHeader
	}
	return nil
}

// trigger is *TRG: start an armed acquisition now; b.mu is held.
func (b *Bench) trigger(in *instrument) {
	a := &in.acq
	if in.prof.Buffered == nil || !a.armed || a.triggered {
		in.st.push(scpiError{-211, "Trigger ignored"})
		return
	}
	if a.lostTriggers > 0 {
		a.lostTriggers--
		return
	}
	a.triggered = true
	// The trigger arrives now, on the clock, which may lie up to one
	// physics step beyond the last step computed (simT): the instrument
	// counts from the trigger's own instant, not from that step.
	a.trigAt = b.clock.Now().Sub(b.start).Seconds() + a.lateBy
	a.lateBy = 0
	a.prevT = b.simT.Seconds()
	a.prev, _ = b.reading(in, 0)
	b.sampleBuffer(in)
}

// sampleBuffers takes the samples that fell within the last physics step;
// b.mu is held.
func (b *Bench) sampleBuffers() {
	for _, in := range b.insts {
		if in.acq.triggered && len(in.acq.values) < in.acq.count {
			b.sampleBuffer(in)
		}
	}
}

func (b *Bench) sampleBuffer(in *instrument) {
	a := &in.acq
	now := b.simT.Seconds()
	cur, ok := b.reading(in, 0)
	rate := 1 + clockDrift[in.role]
	for len(a.values) < a.count {
		tk := a.trigAt + (triggerLatency[in.role]+a.delay+float64(len(a.values))*a.period)/rate
		if tk > now+1e-12 {
			break
		}
		f := 1.0
		if now > a.prevT {
			f = math.Max(0, math.Min(1, (tk-a.prevT)/(now-a.prevT)))
		}
		n := in.noise.NormFloat64()
		noisy, _ := b.reading(in, n)
		v := a.prev + f*(cur-a.prev) + (noisy - cur)
		if !ok {
			v = scpi.Overflow
		}
		a.values = append(a.values, v)
	}
	a.prevT, a.prev = now, cur
}

// bufferedQuery answers a query of the buffered section; b.mu is held.
func (b *Bench) bufferedQuery(in *instrument, m matcher) (reply, *scpiError) {
	a := &in.acq
	switch strings.TrimPrefix(m.name, bufPrefix) {
	case "done":
		return reply{Bool: a.triggered && len(a.values) == a.count}, nil
	case "clock":
		return reply{Raw: strconv.FormatFloat(b.instClock(in), 'f', 9, 64)}, nil
	case "trigger_time":
		if !a.triggered {
			return reply{}, &scpiError{-230, "Data corrupt or stale"}
		}
		at := clockOffset(in.serial) + (1+clockDrift[in.role])*a.trigAt
		return reply{Raw: strconv.FormatFloat(at, 'f', 9, 64)}, nil
	case "fetch":
		if !a.triggered || len(a.values) < a.count {
			return reply{}, &scpiError{-230, "Data corrupt or stale"}
		}
		vs := a.values
		if a.shortBuffers > 0 {
			a.shortBuffers--
			vs = vs[:len(vs)*3/4]
		}
		f := in.prof.Buffered.Fetch
		scale := f.Scale
		if scale == 0 {
			scale = 1
		}
		out := make([]float64, len(vs))
		for i, v := range vs {
			out[i] = v / scale
			if v == scpi.Overflow {
				out[i] = v
			}
		}
		data, err := scpi.EncodeArray(out, f.Data)
		if err != nil {
			return reply{}, &errSettings
		}
		return reply{Raw: string(scpi.Block(data))}, nil
	}
	return reply{}, &errUndefHeader
}

// fireBuffered arms a fault of the timed acquisition; b.mu is held.
func fireBuffered(in *instrument, kind string, lag float64) {
	switch kind {
	case FaultLateTrigger:
		in.acq.lateBy = lag
	case FaultNoTrigger:
		in.acq.lostTriggers++
	case FaultShortBuffer:
		in.acq.shortBuffers++
	}
}
