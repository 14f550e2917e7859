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
	// Ramped says the supply ramped continuously during the sweep and H
	// was interpolated at each flux reading's instant (LoopInfo.Ramped):
	// the samples' time uncertainty × dH/dt then enters every budget as
	// "timing" (timing.go).
	Ramped bool
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
//
// Each stage of the chain in the package doc is one function below, in
// the chain's order; the corrections and budget sources are listed in the
// order the stages add them.
func Loop(raw []record.Sample, s Setup) (points []record.Point, figs []record.Figure, corr []record.Correction, err error) {
	if err := s.Validate(); err != nil {
		return nil, nil, nil, err
	}
	hFrom := s.hSource()
	al := alignH(raw, hFrom)
	sw, pre, post, err := splitPhases(raw, al.h, hFrom)
	if err != nil {
		return nil, nil, nil, err
	}
	nab := float64(s.N2) * float64(s.Area) // Wb-turns per T

	corr = append(corr, geometryNote(s))
	corr = appendAlignNote(corr, al, hFrom, len(raw))
	corr = appendMissingNote(corr, sw)
	h := sw.field(s, hFrom)
	d := driftRates(pre, post)
	corr = append(corr, d.baseline(sw.t, sw.psi, nab))
	b := correct.BFromFlux(sw.psi, sw.psi, s.N2, s.Area)
	corr = appendAirFlux(corr, b, h, s)

	shape, err := loop.Detect(h)
	if err != nil {
		return nil, nil, nil, err
	}
	c := curve{t: sw.t, h: h, b: b, shape: shape, nab: nab}
	lc, sources, err := c.level(s, d)
	if err != nil {
		return nil, nil, nil, err
	}
	corr = append(corr, lc...)
	if corr, err = appendDemag(corr, h, b, s.DemagFactor); err != nil {
		return nil, nil, nil, err
	}
	sources = append(sources, instrumentSources(s, hFrom)...)
	sources = append(sources, s.Extra...)
	if figs, err = c.figures(s, sources); err != nil {
		return nil, nil, nil, err
	}
	if s.Ramped {
		if figs, err = c.addTiming(s, figs, sw.tu); err != nil {
			return nil, nil, nil, err
		}
	}
	// The times in s are not needed any more: their storage takes J.
	return pointsOf(sw.td, h, b, correct.Polarization(sw.t, h, b), shape), figs, corr, nil
}

// hSource is s.HFrom with its default.
func (s Setup) hSource() string {
	if s.HFrom == "" {
		return HFromCurrent
	}
	return s.HFrom
}

// driftMode is s.Drift with its default.
func (s Setup) driftMode() string {
	if s.Drift == "" {
		return DriftCyclic
	}
	return s.Drift
}

// seconds is a time stamp in s.
func seconds(d time.Duration) float64 { return float64(d) / float64(time.Second) }

// aligned is the H channel (current or probe reading) of every raw sample
// brought to the flux reading's time (alignTo): the values, the largest
// offset met and how many values moved.
type aligned struct {
	h     []float64
	skew  time.Duration
	moved int
}

// alignH brings the channel H is taken from to the flux reading's time:
// the current (or the probe field) of a sample was read at T+DtI (T+DtB),
// not at the flux reading's time T.
func alignH(raw []record.Sample, hFrom string) aligned {
	var a aligned
	if hFrom == HFromCurrent {
		a.h, a.skew, a.moved = alignTo(raw, func(r *record.Sample) (float64, time.Duration) { return r.I, r.DtI })
	} else {
		a.h, a.skew, a.moved = alignTo(raw, func(r *record.Sample) (float64, time.Duration) { return r.BProbe, r.DtB })
	}
	return a
}

// hold is the samples of one static hold with a flux reading: times (s),
// flux linkage (Wb-turns) and the aligned H channel (any scale).
type hold struct{ t, psi, x []float64 }

func (hd *hold) add(r *record.Sample, x float64) {
	if finite(r.Psi) {
		hd.t, hd.psi, hd.x = append(hd.t, seconds(r.T)), append(hd.psi, r.Psi), append(hd.x, x)
	}
}

// sweep is the usable sweep samples of a step, in time order: those with
// both the flux and the H channel read.
type sweep struct {
	t   []float64       // s
	td  []time.Duration // the same times as stamped
	tu  []time.Duration // their uncertainties (record.Sample.TUnc)
	psi []float64       // Wb-turns; B in place from the B stage on
	// x is the H channel as read: the current (A), or the probe reading
	// (T) with its temperature (°C) in temp. H in place from field on.
	x, temp    []float64
	n, missing int // sweep samples in the step, and those left out
}

func (sw *sweep) add(r *record.Sample, hv float64, fromCurrent bool) {
	sw.n++
	if !finite(r.Psi) || !finite(hv) {
		sw.missing++
		return
	}
	sw.t = append(sw.t, seconds(r.T))
	sw.x = append(sw.x, hv)
	if !fromCurrent {
		sw.temp = append(sw.temp, r.TempC)
	}
	sw.psi = append(sw.psi, r.Psi)
	sw.td = append(sw.td, r.T)
	sw.tu = append(sw.tu, r.TUnc)
}

// splitPhases sorts the samples of a step by phase: the holds with a flux
// reading, and the usable sweep samples with hAt, the aligned H channel
// of each raw sample. It refuses an unknown phase, fewer than 3 sweep
// samples, more than half of them unusable, and time running backwards.
func splitPhases(raw []record.Sample, hAt []float64, hFrom string) (sw sweep, pre, post hold, err error) {
	// Capacity len(raw): the holds are short, and one pass is cheaper than
	// counting the sweep samples first.
	n := len(raw)
	sw.t = make([]float64, 0, n)
	sw.psi = make([]float64, 0, n)
	sw.td = make([]time.Duration, 0, n)
	sw.x = make([]float64, 0, n)
	fromCurrent := hFrom == HFromCurrent
	if !fromCurrent {
		sw.temp = make([]float64, 0, n)
	}
	for i := range raw {
		r := &raw[i] // a Sample is 96 bytes: do not copy it
		switch r.Phase {
		case record.PreHold:
			pre.add(r, hAt[i])
		case record.PostHold:
			post.add(r, hAt[i])
		case record.Sweep:
			sw.add(r, hAt[i], fromCurrent)
		default:
			return sweep{}, hold{}, hold{}, fmt.Errorf("sample %d: unknown phase %q", i, r.Phase)
		}
	}
	return sw, pre, post, sw.check(raw, hFrom)
}

// check refuses a sweep too short, mostly unusable or running backwards.
func (sw *sweep) check(raw []record.Sample, hFrom string) error {
	if sw.n < 3 {
		return fmt.Errorf("%w: %d in the step", ErrNoSweep, sw.n)
	}
	if 2*sw.missing > sw.n {
		return fmt.Errorf("%d of %d sweep samples lack the flux or the %s reading", sw.missing, sw.n, hFrom)
	}
	for i := 1; i < len(sw.t); i++ {
		if sw.t[i] < sw.t[i-1] {
			return fmt.Errorf("sample %d: time %v runs backwards (previous sweep sample %v)",
				rawIndex(raw, i, hFrom), sw.td[i], sw.td[i-1])
		}
	}
	return nil
}

// field turns the H channel of the sweep samples into H (A/m) in place:
// N1·I/l_m from the current, B_probe/μ0 after the probe's calibration from
// the field meter.
func (sw *sweep) field(s Setup, hFrom string) []float64 {
	if hFrom == HFromCurrent {
		return correct.HFromCurrent(sw.x, sw.x, s.N1, s.PathLength)
	}
	return correct.HFromProbe(sw.x, sw.x, sw.temp, s.Probe)
}

// geometryNote records the geometry and turns the chain uses.
func geometryNote(s Setup) record.Correction {
	return record.Correction{Name: "geometry", Size: float64(s.PathLength), Unit: "m",
		Note: fmt.Sprintf("l_m %.6g m, A %.6g m², search coil %.6g m², N1 %d, N2 %d, relative standard uncertainties l_m %.2g, A %.2g; %s",
			float64(s.PathLength), float64(s.Area), float64(s.CoilArea), s.N1, s.N2, s.RelUPath, s.RelUArea, s.Geometry)}
}

// appendAlignNote records the time alignment of the H channel, if any
// reading was offset from the flux reading.
func appendAlignNote(corr []record.Correction, al aligned, hFrom string, nRaw int) []record.Correction {
	if al.skew == 0 {
		return corr
	}
	what := "current read-back"
	if hFrom == HFromFieldMeter {
		what = "field-meter reading"
	}
	return append(corr, record.Correction{Name: "time-alignment", Size: al.skew.Seconds(), Unit: "s",
		Note: fmt.Sprintf("%s brought to the flux reading's time: values between samples are interpolated linearly in time within one setpoint (%d of %d samples moved; across a setpoint step a sample keeps its own reading, both read after the setting completed); size: largest offset between the readings", what, al.moved, nRaw)})
}

// appendMissingNote records the sweep samples left out.
func appendMissingNote(corr []record.Correction, sw sweep) []record.Correction {
	if sw.missing == 0 {
		return corr
	}
	return append(corr, record.Correction{Name: "missing-samples", Size: float64(sw.missing), Unit: "",
		Note: fmt.Sprintf("%d of %d sweep samples without a reading left out", sw.missing, sw.n)})
}

// drift is the integrator's drift measured over the holds (holdRate). A
// step with one hold only uses its rate for both ends.
type drift struct {
	pre, post         correct.Rate
	havePre, havePost bool
}

func driftRates(pre, post hold) drift {
	var d drift
	if r, err := holdRate(pre.t, pre.psi, pre.x); err == nil {
		d.pre, d.havePre = r, true
	}
	if r, err := holdRate(post.t, post.psi, post.x); err == nil {
		d.post, d.havePost = r, true
	}
	switch {
	case d.havePre && !d.havePost:
		d.post = d.pre
	case d.havePost && !d.havePre:
		d.pre = d.post
	}
	return d
}

// measured says whether any hold gave a rate.
func (d drift) measured() bool { return d.havePre || d.havePost }

// baseline removes the drift from psi in place (correct.Baseline from the
// first sweep sample) and returns its correction, in T.
func (d drift) baseline(t, psi []float64, nab float64) record.Correction {
	if !d.measured() {
		return record.Correction{Name: "drift-baseline", Size: 0, Unit: "T",
			Note: "no static holds: drift rate not measured, closure correction only"}
	}
	m := correct.Baseline(t, psi, t[0], d.pre, d.post)
	return record.Correction{Name: "drift-baseline", Size: m / nab, Unit: "T",
		Note: fmt.Sprintf("rates pre %s, post %s; each hold fitted as ψ = a + r·t + c·H (flux of a field still settling taken up by c); rate interpolated linearly in time, largest baseline %.3g Wb-turns",
			rateText(d.pre, d.havePre), rateText(d.post, d.havePost), m)}
}

// appendAirFlux removes the flux of the air inside a search coil larger
// than the specimen from b, in place, and records it.
func appendAirFlux(corr []record.Correction, b, h []float64, s Setup) []record.Correction {
	m := correct.AirFlux(b, h, s.CoilArea, s.Area)
	if !(m > 0) {
		return corr
	}
	return append(corr, record.Correction{Name: "air-flux", Size: m, Unit: "T",
		Note: fmt.Sprintf("B −= μ0·H·(A_c − A)/A, A_c/A = %.4g; largest value", float64(s.CoilArea/s.Area))})
}

// curve is the sweep on its way to points: times (s), H (A/m) and B (T),
// its branch structure and N2·A (Wb-turns per T).
type curve struct {
	t, h, b []float64
	shape   loop.Shape
	nab     float64
}

// level fixes the absolute level of B in place by the drift mode and
// returns the corrections and the budget sources that come with it.
func (c curve) level(s Setup, d drift) ([]record.Correction, []loop.Source, error) {
	if s.driftMode() == DriftCyclic {
		return c.centre(d)
	}
	return c.anchor(s, d)
}

// centre levels a cyclic loop: closure between the first and last tips of
// the same kind, then centering on the tips.
func (c curve) centre(d drift) ([]record.Correction, []loop.Source, error) {
	corr, sources, err := c.close(d)
	if err != nil {
		return nil, nil, err
	}
	if cen, ok := c.centering(); ok {
		corr = append(corr, cen)
	}
	return corr, sources, nil
}

// close removes the closure error ε between the first and last tips of the
// same kind linearly in time, in place.
func (c curve) close(d drift) ([]record.Correction, []loop.Source, error) {
	ta, tb, ok := loop.ClosurePair(c.shape.Tips(c.t, c.h, c.b))
	if !ok {
		return []record.Correction{{Name: "closure", Size: 0, Unit: "T",
			Note: "not applied: fewer than two tips of the same kind"}}, nil, nil
	}
	// The two tips are the same state only at the same H: under
	// closed-loop field control the last tip may stop short of the
	// first, so the B that the H difference accounts for (slope of
	// B on H at the first tip) is not closure error.
	eps, dh := tb.B-ta.B, tb.H-ta.H
	hNote := ""
	if k, ok := tipSlope(c.h, c.b, ta.Index, TopFraction*(c.shape.Hi-c.shape.Lo)); ok && dh != 0 {
		eps -= k * dh
		hNote = fmt.Sprintf(", less dB/dH·ΔH = %.4g T for the tips' H differing by %.4g A/m", k*dh, dh)
	}
	if err := correct.Closure(c.t, c.b, ta.T, tb.T, eps); err != nil {
		return nil, nil, err
	}
	corr := []record.Correction{{Name: "closure", Size: eps, Unit: "T",
		Note: fmt.Sprintf("ε = B(t_b) − B(t_a) between tips at %.4g s and %.4g s%s, removed linearly in time", ta.T, tb.T, hNote)}}
	var sources []loop.Source
	if ue := math.Hypot(ta.UB, tb.UB); ue > 0 {
		// ε is the difference of two tip means: its uncertainty tilts B
		// by u(ε)·(t − t_a)/(t_b − t_a).
		sources = append(sources, loop.Source{Name: "closure", BT1: ue / (tb.T - ta.T), T0: ta.T,
			Note: "Type A: the tips' B means that give ε"})
	}
	if d.havePre && d.havePost && d.post.T > d.pre.T {
		// The baseline's rate slope is uncertain by δ; after closure
		// through t_a and t_b the residual is δ/(2T)·(t − t_a)(t − t_b).
		u := math.Hypot(d.pre.U, d.post.U)
		k := u / (2 * (d.post.T - d.pre.T)) / c.nab
		sources = append(sources, loop.Source{Name: "drift rate", BT2: k, BT1: -k * (tb.T - ta.T), T0: ta.T,
			Note: "Type A: standard errors of the hold fits; residual after closure"})
	}
	return corr, sources, nil
}

// centering subtracts (B_top + B_bottom)/2 of the tips (after closure)
// from B in place; ok is false without tips of both kinds.
func (c curve) centering() (record.Correction, bool) {
	tips := c.shape.Tips(c.t, c.h, c.b)
	top, bot, ok := loop.TipLevels(tips)
	if !ok {
		return record.Correction{}, false
	}
	// A symmetric loop has B_top = −B_bottom only at H_top = −H_bottom;
	// under closed-loop control the tips may miss that by some kA/m.
	sumH, k, ok := tipAsymmetry(c.t, c.h, c.b, tips, TopFraction*(c.shape.Hi-c.shape.Lo))
	note := "offset (B_top + B_bottom)/2 subtracted"
	if ok && sumH != 0 {
		top -= k * sumH
		note = fmt.Sprintf("offset (B_top + B_bottom − dB/dH·(H_top + H_bottom))/2 subtracted, the tips' H differing in magnitude by %.4g A/m (dB/dH·ΔH = %.4g T)", sumH, k*sumH)
	}
	off := correct.Center(c.b, top, bot)
	return record.Correction{Name: "centering", Size: off, Unit: "T", Note: note}, true
}

// anchor levels an open curve at its first sweep sample: B = 0 for a
// demagnetized start, the start level for DriftFromLevel.
func (c curve) anchor(s Setup, d drift) ([]record.Correction, []loop.Source, error) {
	off := correct.Anchor(c.b, 0)
	note := "demagnetized start: B = 0 at the first sweep sample"
	if span := c.shape.Hi - c.shape.Lo; math.Abs(c.h[0]) > 0.05*span {
		note += fmt.Sprintf("; CHECK: the sweep starts at H = %.4g A/m, not near 0, so it cannot start demagnetized and the level of B is only relative (use %q with the start level)",
			c.h[0], DriftFromLevel)
	}
	var sources []loop.Source
	if s.driftMode() == DriftFromLevel {
		start, src, err := c.startAt(s)
		if err != nil {
			return nil, nil, err
		}
		off -= start
		note = fmt.Sprintf("open curve: B = %.6g T (the given start level) at the first sweep sample", start)
		if start == 0 {
			note += "; no start level given: the level of B is relative"
		}
		sources = append(sources, src...)
	}
	corr := []record.Correction{{Name: "anchor", Size: off, Unit: "T", Note: note}}
	if d.measured() {
		u := d.pre.U
		if !d.havePre {
			u = d.post.U
		}
		sources = append(sources, loop.Source{Name: "drift rate", BT1: u / c.nab, T0: c.t[0],
			Note: "Type A: standard error of the hold fit, integrated from the start"})
	}
	if s.Flux.Offset > 0 {
		sources = append(sources, loop.Source{Name: "integrator offset", BShift: s.Flux.Offset / 2 / c.nab,
			Note: "Type B: profile accuracy, k = 2 → standard"})
	}
	return corr, sources, nil
}

// startAt adds the start level (Setup.StartLevel at the first sweep
// sample's H, or Setup.StartB) to B, anchored at 0 there, in place; it
// returns the level in T and its budget source.
func (c curve) startAt(s Setup) (float64, []loop.Source, error) {
	b0, u0 := s.StartB, s.UStartB
	if s.StartLevel != nil {
		var err error
		if b0, u0, err = s.StartLevel(c.h[0]); err != nil {
			return 0, nil, err
		}
	}
	for i := range c.b {
		c.b[i] += float64(b0)
	}
	if !(u0 > 0) {
		return float64(b0), nil, nil
	}
	return float64(b0), []loop.Source{{Name: "start level", BShift: float64(u0),
		Note: "Type A: standard error of the level the curve starts from"}}, nil
}

// appendDemag corrects H in place for the demagnetizing field of an open
// specimen of factor n (0: none) and records it.
func appendDemag(corr []record.Correction, h, b []float64, n float64) ([]record.Correction, error) {
	if !(n > 0) {
		return corr, nil
	}
	m, err := correct.Demag(h, b, n)
	if err != nil {
		return nil, err
	}
	return append(corr, record.Correction{Name: "demag", Size: m, Unit: "A/m",
		Note: fmt.Sprintf("H_int = H − N·M with N = %g; largest N·M", n)}), nil
}

// instrumentSources are the budget sources of the geometry and the
// instruments' accuracies.
func instrumentSources(s Setup, hFrom string) []loop.Source {
	var sources []loop.Source
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
	return appendSource(sources, "integrator gain", 0, 0, s.Flux.Gain/2, 0, "Type B: profile accuracy, k = 2 → standard")
}

// figures evaluates the figures of the curve with the budget sources
// (calib/loop) and keeps those the specimen's class reports.
func (c curve) figures(s Setup, sources []loop.Source) ([]record.Figure, error) {
	muB := s.MuInitialB
	if muB == 0 {
		muB = DefaultMuInitialB
	}
	fs, err := loop.Figures(c.t, c.h, c.b, c.shape, loop.Options{
		MuInitialB: float64(muB), InitialCurve: s.driftMode() == DriftDemagStart,
		Density: float64(s.Density), Sources: sources,
	})
	if err != nil {
		return nil, err
	}
	class := s.Class
	if class == "" {
		class = ClassSoft
	}
	var figs []record.Figure
	for _, f := range fs {
		if !reported(class, f.Name) {
			continue
		}
		figs = append(figs, record.Figure{Name: f.Name, Value: f.Value, U: f.U, Unit: f.Unit,
			Note: f.Note + "; " + f.Budget.Summary(f.Unit)})
	}
	return figs, nil
}

// pointsOf returns the corrected points labelled with their branch.
func pointsOf(td []time.Duration, h, b, j []float64, shape loop.Shape) []record.Point {
	points := make([]record.Point, len(td))
	for i := range td {
		points[i] = record.Point{T: td[i], H: h[i], B: b[i], J: j[i]}
	}
	shape.Label(func(i, branch int) { points[i].Branch = branch })
	return points
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
