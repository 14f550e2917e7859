package process

import (
	"errors"
	"fmt"
	"math"
	"time"

	"hystd/acq/record"
	"hystd/calib/correct"
	"hystd/calib/loop"
	"hystd/calib/units"
)

// How H is obtained.
const (
	HFromCurrent    = "current"     // H = N1·I/l_m
	HFromFieldMeter = "field_meter" // H = B_probe/μ0 beside the specimen
)

// Specimen classes: which figures are reported.
const (
	ClassSoft   = loop.ClassSoft
	ClassMagnet = loop.ClassMagnet
)

// Drift modes: how the absolute level of B is fixed.
const (
	// DriftCyclic: drift baseline from the holds when present, closure of
	// the cyclic loop between tips of the same kind, then centering.
	DriftCyclic = "cyclic-centred"
	// DriftDemagStart: the sweep starts from a demagnetized state, B = 0 at
	// the first sweep sample; drift baseline from the holds; no closure and
	// no centering. Gives the initial curve and μ_initial.
	DriftDemagStart = "demagnetized-start"
	// DriftFromLevel: an open curve (a demagnetization curve from
	// saturation, a recoil loop) whose first sweep sample is at the level
	// Setup.StartB, e.g. the tip B of a loop measured before at the same
	// field; drift baseline from the holds; no closure and no centering.
	DriftFromLevel = "from-level"
)

// DefaultMuInitialB is the flux density at which μ_initial is read when a
// Setup gives none (SetupFrom takes the specimen's mu_initial_b_mt, whose
// default is the same): 4 mT, usual for Ni-Fe alloys (REFERENCE §3, from memory).
const DefaultMuInitialB units.Tesla = 4e-3

// Accuracy is an instrument's reading specification as a 95 % (k = 2)
// interval |U| = Gain·|reading| + Offset, Offset in the reading's SI unit.
// The zero value leaves the instrument out of the budget.
type Accuracy struct {
	Gain, Offset float64
}

// Setup is everything Loop needs besides the samples. SetupFrom fills it
// from a fixture and a specimen; SetAccuracy adds instrument specifications.
type Setup struct {
	PathLength         units.Metre       // l_m, for H from current
	Area               units.SquareMetre // specimen cross-section A
	CoilArea           units.SquareMetre // search-coil area; 0 or ≤ A: no air-flux correction
	RelUPath, RelUArea float64           // relative standard uncertainties of l_m and A
	Geometry           string            // how l_m and A were obtained
	N1, N2             int
	HFrom              string                      // HFromCurrent (default) or HFromFieldMeter
	Probe              correct.ProbeCal            // field-meter calibration (HFromFieldMeter)
	Class              string                      // ClassSoft (default) or ClassMagnet
	Density            units.KilogramPerCubicMetre // for the loss per kg; 0 omits it
	Mass               units.Kilogram              // as configured, for the record
	Drift              string                      // DriftCyclic (default), DriftDemagStart or DriftFromLevel
	DemagFactor        float64                     // N of an open specimen; 0: no correction
	MuInitialB         units.Tesla                 // where μ_initial is read; 0: DefaultMuInitialB
	// StartB is B at the first sweep sample for DriftFromLevel; UStartB is
	// its standard uncertainty, a shift of the whole curve in the budget.
	StartB, UStartB units.Tesla
	// StartLevel, when set, replaces StartB and UStartB for DriftFromLevel:
	// Loop calls it once with H (A/m, before any demagnetizing correction)
	// at the first sweep sample, and an error from it is Loop's error. It
	// lets a caller place an open curve by its start field in one pass.
	StartLevel func(h0 float64) (b, u units.Tesla, err error)
	// Accuracy of the current read-back (A), the integrator (Wb-turns) and
	// the field meter (T).
	Current, Flux, Field Accuracy
	// Extra are further budget sources (standard uncertainties), e.g. of
	// calibration records applied to the samples before Loop.
	Extra []loop.Source
}

// Validate reports the first problem of s that makes Loop impossible.
func (s Setup) Validate() error {
	switch s.HFrom {
	case "", HFromCurrent:
		if !(s.PathLength > 0) || s.N1 <= 0 {
			return fmt.Errorf("setup: H from current needs a path length > 0 and N1 > 0 (got %v, %d)", s.PathLength, s.N1)
		}
	case HFromFieldMeter:
	default:
		return fmt.Errorf("setup: h_from %q: want %q or %q", s.HFrom, HFromCurrent, HFromFieldMeter)
	}
	if !(s.Area > 0) || s.N2 <= 0 {
		return fmt.Errorf("setup: B from flux needs a specimen area > 0 and N2 > 0 (got %v, %d)", s.Area, s.N2)
	}
	switch s.Class {
	case "", ClassSoft, ClassMagnet:
	default:
		return fmt.Errorf("setup: class %q: want %q or %q", s.Class, ClassSoft, ClassMagnet)
	}
	switch s.Drift {
	case "", DriftCyclic, DriftDemagStart, DriftFromLevel:
	default:
		return fmt.Errorf("setup: drift mode %q: want %q, %q or %q", s.Drift, DriftCyclic, DriftDemagStart, DriftFromLevel)
	}
	if !(s.DemagFactor >= 0 && s.DemagFactor < 1) {
		return fmt.Errorf("setup: demagnetizing factor %g: must be in [0, 1)", s.DemagFactor)
	}
	return nil
}

// ErrNoSweep is returned for a step without enough sweep samples.
var ErrNoSweep = errors.New("no sweep samples")

// Loop converts the raw samples of one loop step into corrected points
// (one per usable sweep sample, in time order), figures (record.Figure.U is
// the expanded uncertainty, k = 2) and the corrections applied, each with
// its size. raw is not modified. Samples of the pre and post holds give the
// drift rates; a step without holds gets the closure correction only.
// Sweep samples with a needed channel missing (NaN) are left out and
// counted in a correction note; more than half missing is an error.
func Loop(raw []record.Sample, s Setup) (points []record.Point, figs []record.Figure, corr []record.Correction, err error) {
	if err := s.Validate(); err != nil {
		return nil, nil, nil, err
	}
	hFrom := s.HFrom
	if hFrom == "" {
		hFrom = HFromCurrent
	}
	sec := func(d time.Duration) float64 { return float64(d) / float64(time.Second) }

	var preT, preP, preX, postT, postP, postX []float64
	// Capacity len(raw): the holds are short, and one pass is cheaper than
	// counting the sweep samples first.
	n := len(raw)
	t := make([]float64, 0, n)
	psi := make([]float64, 0, n)
	td := make([]time.Duration, 0, n) // time stamps of the kept samples
	var cur, probe, temp []float64
	if hFrom == HFromCurrent {
		cur = make([]float64, 0, n)
	} else {
		probe = make([]float64, 0, n)
		temp = make([]float64, 0, n)
	}
	nSweep, missing := 0, 0
	kH := float64(s.N1) / float64(s.PathLength)
	// The current (or the probe field) of a sample was read at T+DtI (T+DtB),
	// not at the flux reading's time T: bring it to T first.
	var hAt []float64
	var hSkew time.Duration
	var hMoved int
	if hFrom == HFromCurrent {
		hAt, hSkew, hMoved = alignTo(raw, func(r *record.Sample) (float64, time.Duration) { return r.I, r.DtI })
	} else {
		hAt, hSkew, hMoved = alignTo(raw, func(r *record.Sample) (float64, time.Duration) { return r.BProbe, r.DtB })
	}
	for i := range raw {
		r := &raw[i] // a Sample is 96 bytes: do not copy it
		switch r.Phase {
		case record.PreHold:
			if finite(r.Psi) {
				preT, preP, preX = append(preT, sec(r.T)), append(preP, r.Psi), append(preX, hAt[i])
			}
		case record.PostHold:
			if finite(r.Psi) {
				postT, postP, postX = append(postT, sec(r.T)), append(postP, r.Psi), append(postX, hAt[i])
			}
		case record.Sweep:
			nSweep++
			hv := hAt[i]
			if !finite(r.Psi) || !finite(hv) {
				missing++
				continue
			}
			t = append(t, sec(r.T))
			if hFrom == HFromCurrent {
				cur = append(cur, kH*hv) // H = N1·I/l_m, computed here to save a pass
			} else {
				probe = append(probe, hv)
				temp = append(temp, r.TempC)
			}
			psi = append(psi, r.Psi)
			td = append(td, r.T)
		default:
			return nil, nil, nil, fmt.Errorf("sample %d: unknown phase %q", i, r.Phase)
		}
	}
	if nSweep < 3 {
		return nil, nil, nil, fmt.Errorf("%w: %d in the step", ErrNoSweep, nSweep)
	}
	if 2*missing > nSweep {
		return nil, nil, nil, fmt.Errorf("%d of %d sweep samples lack the flux or the %s reading", missing, nSweep, hFrom)
	}
	for i := 1; i < len(t); i++ {
		if t[i] < t[i-1] {
			return nil, nil, nil, fmt.Errorf("sample %d: time %v runs backwards (previous sweep sample %v)",
				rawIndex(raw, i, hFrom), td[i], td[i-1])
		}
	}
	nab := float64(s.N2) * float64(s.Area) // Wb-turns per T

	corr = append(corr, record.Correction{Name: "geometry", Size: float64(s.PathLength), Unit: "m",
		Note: fmt.Sprintf("l_m %.6g m, A %.6g m², search coil %.6g m², N1 %d, N2 %d, relative standard uncertainties l_m %.2g, A %.2g; %s",
			float64(s.PathLength), float64(s.Area), float64(s.CoilArea), s.N1, s.N2, s.RelUPath, s.RelUArea, s.Geometry)})
	if hSkew != 0 {
		what := "current read-back"
		if hFrom == HFromFieldMeter {
			what = "field-meter reading"
		}
		corr = append(corr, record.Correction{Name: "time-alignment", Size: hSkew.Seconds(), Unit: "s",
			Note: fmt.Sprintf("%s brought to the flux reading's time: values between samples are interpolated linearly in time within one setpoint (%d of %d samples moved; across a setpoint step a sample keeps its own reading, both read after the setting completed); size: largest offset between the readings", what, hMoved, len(raw))})
	}
	if missing > 0 {
		corr = append(corr, record.Correction{Name: "missing-samples", Size: float64(missing), Unit: "",
			Note: fmt.Sprintf("%d of %d sweep samples without a reading left out", missing, nSweep)})
	}

	// H.
	var h []float64
	if hFrom == HFromCurrent {
		h = cur // H = N1·I/l_m (correct.HFromCurrent) applied while gathering
	} else {
		h = correct.HFromProbe(probe, probe, temp, s.Probe)
	}

	// Drift baseline on ψ.
	var pre, post correct.Rate
	var havePre, havePost bool
	if r, err := holdRate(preT, preP, preX); err == nil {
		pre, havePre = r, true
	}
	if r, err := holdRate(postT, postP, postX); err == nil {
		post, havePost = r, true
	}
	switch {
	case havePre && !havePost:
		post = pre
	case havePost && !havePre:
		pre = post
	}
	if havePre || havePost {
		m := correct.Baseline(t, psi, t[0], pre, post)
		corr = append(corr, record.Correction{Name: "drift-baseline", Size: m / nab, Unit: "T",
			Note: fmt.Sprintf("rates pre %s, post %s; each hold fitted as ψ = a + r·t + c·H (flux of a field still settling taken up by c); rate interpolated linearly in time, largest baseline %.3g Wb-turns",
				rateText(pre, havePre), rateText(post, havePost), m)})
	} else {
		corr = append(corr, record.Correction{Name: "drift-baseline", Size: 0, Unit: "T",
			Note: "no static holds: drift rate not measured, closure correction only"})
	}

	b := correct.BFromFlux(psi, psi, s.N2, s.Area)
	if m := correct.AirFlux(b, h, s.CoilArea, s.Area); m > 0 {
		corr = append(corr, record.Correction{Name: "air-flux", Size: m, Unit: "T",
			Note: fmt.Sprintf("B −= μ0·H·(A_c − A)/A, A_c/A = %.4g; largest value", float64(s.CoilArea/s.Area))})
	}

	shape, err := loop.Detect(h)
	if err != nil {
		return nil, nil, nil, err
	}
	var sources []loop.Source
	drift := s.Drift
	if drift == "" {
		drift = DriftCyclic
	}
	if drift == DriftCyclic {
		tips := shape.Tips(t, h, b)
		if ta, tb, ok := loop.ClosurePair(tips); ok {
			// The two tips are the same state only at the same H: under
			// closed-loop field control the last tip may stop short of the
			// first, so the B that the H difference accounts for (slope of
			// B on H at the first tip) is not closure error.
			eps, dh := tb.B-ta.B, tb.H-ta.H
			hNote := ""
			if k, ok := tipSlope(h, b, ta.Index, TopFraction*(shape.Hi-shape.Lo)); ok && dh != 0 {
				eps -= k * dh
				hNote = fmt.Sprintf(", less dB/dH·ΔH = %.4g T for the tips' H differing by %.4g A/m", k*dh, dh)
			}
			if err := correct.Closure(t, b, ta.T, tb.T, eps); err != nil {
				return nil, nil, nil, err
			}
			corr = append(corr, record.Correction{Name: "closure", Size: eps, Unit: "T",
				Note: fmt.Sprintf("ε = B(t_b) − B(t_a) between tips at %.4g s and %.4g s%s, removed linearly in time", ta.T, tb.T, hNote)})
			if ue := math.Hypot(ta.UB, tb.UB); ue > 0 {
				// ε is the difference of two tip means: its uncertainty tilts B
				// by u(ε)·(t − t_a)/(t_b − t_a).
				sources = append(sources, loop.Source{Name: "closure", BT1: ue / (tb.T - ta.T), T0: ta.T,
					Note: "Type A: the tips' B means that give ε"})
			}
			if havePre && havePost && post.T > pre.T {
				// The baseline's rate slope is uncertain by δ; after closure
				// through t_a and t_b the residual is δ/(2T)·(t − t_a)(t − t_b).
				d := math.Hypot(pre.U, post.U)
				k := d / (2 * (post.T - pre.T)) / nab
				sources = append(sources, loop.Source{Name: "drift rate", BT2: k, BT1: -k * (tb.T - ta.T), T0: ta.T,
					Note: "Type A: standard errors of the hold fits; residual after closure"})
			}
		} else {
			corr = append(corr, record.Correction{Name: "closure", Size: 0, Unit: "T",
				Note: "not applied: fewer than two tips of the same kind"})
		}
		tips = shape.Tips(t, h, b)
		if top, bot, ok := loop.TipLevels(tips); ok {
			// A symmetric loop has B_top = −B_bottom only at H_top = −H_bottom;
			// under closed-loop control the tips may miss that by some kA/m.
			sumH, k, ok := tipAsymmetry(t, h, b, tips, TopFraction*(shape.Hi-shape.Lo))
			note := "offset (B_top + B_bottom)/2 subtracted"
			if ok && sumH != 0 {
				top -= k * sumH
				note = fmt.Sprintf("offset (B_top + B_bottom − dB/dH·(H_top + H_bottom))/2 subtracted, the tips' H differing in magnitude by %.4g A/m (dB/dH·ΔH = %.4g T)", sumH, k*sumH)
			}
			off := correct.Center(b, top, bot)
			corr = append(corr, record.Correction{Name: "centering", Size: off, Unit: "T", Note: note})
		}
	} else {
		off := correct.Anchor(b, 0)
		note := "demagnetized start: B = 0 at the first sweep sample"
		if span := shape.Hi - shape.Lo; math.Abs(h[0]) > 0.05*span {
			note += fmt.Sprintf("; CHECK: the sweep starts at H = %.4g A/m, not near 0, so it cannot start demagnetized and the level of B is only relative (use %q with the start level)",
				h[0], DriftFromLevel)
		}
		if drift == DriftFromLevel {
			if s.StartLevel != nil {
				sb, su, err := s.StartLevel(h[0])
				if err != nil {
					return nil, nil, nil, err
				}
				s.StartB, s.UStartB = sb, su
			}
			for i := range b {
				b[i] += float64(s.StartB)
			}
			off -= float64(s.StartB)
			note = fmt.Sprintf("open curve: B = %.6g T (the given start level) at the first sweep sample", float64(s.StartB))
			if s.StartB == 0 {
				note += "; no start level given: the level of B is relative"
			}
			if s.UStartB > 0 {
				sources = append(sources, loop.Source{Name: "start level", BShift: float64(s.UStartB),
					Note: "Type A: standard error of the level the curve starts from"})
			}
		}
		corr = append(corr, record.Correction{Name: "anchor", Size: off, Unit: "T", Note: note})
		if havePre || havePost {
			u := pre.U
			if !havePre {
				u = post.U
			}
			sources = append(sources, loop.Source{Name: "drift rate", BT1: u / nab, T0: t[0],
				Note: "Type A: standard error of the hold fit, integrated from the start"})
		}
		if s.Flux.Offset > 0 {
			sources = append(sources, loop.Source{Name: "integrator offset", BShift: s.Flux.Offset / 2 / nab,
				Note: "Type B: profile accuracy, k = 2 → standard"})
		}
	}
	if s.DemagFactor > 0 {
		m, err := correct.Demag(h, b, s.DemagFactor)
		if err != nil {
			return nil, nil, nil, err
		}
		corr = append(corr, record.Correction{Name: "demag", Size: m, Unit: "A/m",
			Note: fmt.Sprintf("H_int = H − N·M with N = %g; largest N·M", s.DemagFactor)})
	}

	// Budget sources of geometry and instruments.
	if hFrom == HFromCurrent {
		sources = appendSource(sources, "path length", -s.RelUPath, 0, 0, 0, "Type B: dimension tolerances")
		sources = appendSource(sources, "current gain", s.Current.Gain/2, 0, 0, 0, "Type B: profile accuracy, k = 2 → standard")
		sources = appendSource(sources, "current offset", 0, float64(s.N1)*s.Current.Offset/2/float64(s.PathLength), 0, 0,
			"Type B: profile accuracy, k = 2 → standard")
	} else {
		sources = appendSource(sources, "field-meter gain", s.Field.Gain/2, 0, 0, 0, "Type B: profile accuracy, k = 2 → standard")
		sources = appendSource(sources, "field-meter offset", 0, s.Field.Offset/2/units.Mu0, 0, 0, "Type B: profile accuracy, k = 2 → standard")
	}
	sources = appendSource(sources, "specimen area", 0, 0, -s.RelUArea, 0, "Type B: dimension, mass and density tolerances")
	sources = appendSource(sources, "integrator gain", 0, 0, s.Flux.Gain/2, 0, "Type B: profile accuracy, k = 2 → standard")

	sources = append(sources, s.Extra...)

	muB := s.MuInitialB
	if muB == 0 {
		muB = DefaultMuInitialB
	}
	fs, err := loop.Figures(t, h, b, shape, loop.Options{
		MuInitialB: float64(muB), InitialCurve: drift == DriftDemagStart,
		Density: float64(s.Density), Sources: sources,
	})
	if err != nil {
		return nil, nil, nil, err
	}
	class := s.Class
	if class == "" {
		class = ClassSoft
	}
	for _, f := range fs {
		if !reported(class, f.Name) {
			continue
		}
		figs = append(figs, record.Figure{Name: f.Name, Value: f.Value, U: f.U, Unit: f.Unit,
			Note: f.Note + "; " + f.Budget.Summary(f.Unit)})
	}

	points = make([]record.Point, len(t))
	for i := range t {
		points[i] = record.Point{T: td[i], H: h[i], B: b[i], J: b[i] - units.Mu0*h[i]}
	}
	shape.Label(func(i, branch int) { points[i].Branch = branch })
	return points, figs, corr, nil
}

// reported says which figures a class reports (calib/loop.Defs).
func reported(class, name string) bool {
	d, ok := loop.DefOf(name)
	return ok && d.From == loop.FromLoop && (d.Class == "" || d.Class == class)
}

func appendSource(s []loop.Source, name string, hScale, hShift, bScale, bShift float64, note string) []loop.Source {
	if hScale == 0 && hShift == 0 && bScale == 0 && bShift == 0 {
		return s
	}
	return append(s, loop.Source{Name: name, HScale: hScale, HShift: hShift, BScale: bScale, BShift: bShift, Note: note})
}

func rateText(r correct.Rate, ok bool) string {
	if !ok {
		return "not measured"
	}
	return fmt.Sprintf("%.4g ± %.2g V (%d samples)", r.Rate, r.U, r.N)
}

// rawIndex returns the index in raw of the k-th sweep sample that Loop
// kept, for error messages.
func rawIndex(raw []record.Sample, k int, hFrom string) int {
	for i := range raw {
		r := &raw[i]
		if r.Phase != record.Sweep {
			continue
		}
		hv := r.I
		if hFrom == HFromFieldMeter {
			hv = r.BProbe
		}
		if !finite(r.Psi) || !finite(hv) {
			continue
		}
		if k == 0 {
			return i
		}
		k--
	}
	return -1
}

// alignTo returns, for every raw sample, the value of one channel at the
// sample's time T, the largest |offset| met and how many values it moved.
// ch gives the channel's value and the offset of its reading from T (the
// reading was taken at T+offset).
//
// Values between samples are interpolated linearly in time from the
// channel's neighbouring readings (its own times T+offset, over all phases,
// in order) — within one setpoint only. The engine completes each setting
// before it reads the channels of a tick, so a step of the setpoint never
// lies between the readings of one sample: the current after a step is
// that of the new level, not a ramp from the previous sample's. Where the
// two readings around T belong to different setpoints the sample keeps its
// own reading (interpolating across the step would pull the value towards
// the previous level by offset/period of a step, narrowing the loop).
// Before the first or after the last reading the nearest two are
// extrapolated, under the same rule. A sample whose channel is not finite
// stays NaN. With every offset zero, or fewer than two finite readings, or
// reading times that do not increase, the values are returned as read.
func alignTo(raw []record.Sample, ch func(*record.Sample) (float64, time.Duration)) ([]float64, time.Duration, int) {
	out := make([]float64, len(raw))
	var skew time.Duration
	n := 0
	ok := true
	var last time.Duration
	for i := range raw {
		v, dt := ch(&raw[i])
		out[i] = v
		if !finite(v) {
			out[i] = math.NaN()
			continue
		}
		skew = max(skew, dt, -dt)
		at := raw[i].T + dt
		if n > 0 && at <= last {
			ok = false
		}
		last = at
		n++
	}
	if skew == 0 || n < 2 || !ok {
		return out, skew, 0
	}
	// The finite readings, at their own times, with their setpoints.
	ts := make([]time.Duration, 0, n)
	vs := make([]float64, 0, n)
	sp := make([]float64, 0, n)
	for i := range raw {
		if v, dt := ch(&raw[i]); finite(v) {
			ts, vs, sp = append(ts, raw[i].T+dt), append(vs, v), append(sp, raw[i].Setpoint)
		}
	}
	moved := 0
	j := 0 // segment [j, j+1] of the readings
	for i := range raw {
		if !finite(out[i]) {
			continue
		}
		at := raw[i].T
		for j < len(ts)-2 && ts[j+1] < at {
			j++
		}
		if sp[j] != sp[j+1] || sp[j] != raw[i].Setpoint {
			continue // a setpoint step between the readings: keep the sample's own
		}
		f := float64(at-ts[j]) / float64(ts[j+1]-ts[j])
		if v := vs[j] + f*(vs[j+1]-vs[j]); v != out[i] {
			out[i] = v
			moved++
		}
	}
	return out, skew, moved
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
