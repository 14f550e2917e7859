package physics

import (
	"fmt"
	"math"
)

// StonerWohlfarth is an ensemble of non-interacting single-domain particles
// with uniaxial anisotropy (Stoner & Wohlfarth, Phil. Trans. R. Soc. A 240
// (1948) 599). Each particle has its easy axis at an angle ψ to the applied
// field and its moment at θ; in units of the anisotropy field H_K its reduced
// energy is
//
//	e(θ) = ½·sin²(θ − ψ) − h·cos θ,  h = H/H_K,
//
// and it sits in the local minimum reached by following the field. The
// magnetization along the field is M = Ms·⟨cos θ⟩ over the ensemble.
//
// Aligned easy axes give a square loop with Hc = H_K. Random easy axes (in
// three dimensions: cos ψ uniform on [0, 1]) give Mr/Ms = 0.5 and Hc ≈ 0.479·H_K.
// A StonerWohlfarth is not safe for concurrent use.
type StonerWohlfarth struct {
	Params SWParams

	psi, theta []float64 // per particle, rad
	h          float64   // present field, A/m
	m          float64   // present magnetization, A/m
}

// SWParams configure a Stoner–Wohlfarth ensemble.
type SWParams struct {
	Ms float64 `yaml:"ms_a_m"` // saturation magnetization, A/m
	HK float64 `yaml:"hk_a_m"` // anisotropy field 2K/(μ0·Ms), A/m
	// EasyAxes is "aligned" (all along the field) or "random" (isotropic).
	EasyAxes string `yaml:"easy_axes"`
	// Particles is the number of easy-axis directions averaged (random
	// only; default 400).
	Particles int `yaml:"particles"`
}

// Validate reports the first parameter out of its domain.
func (p SWParams) Validate() error {
	switch {
	case !(p.Ms > 0):
		return fmt.Errorf("ms_a_m: must be > 0, got %g", p.Ms)
	case !(p.HK > 0):
		return fmt.Errorf("hk_a_m: must be > 0, got %g", p.HK)
	case p.EasyAxes != "aligned" && p.EasyAxes != "random":
		return fmt.Errorf("easy_axes: must be aligned or random, got %q", p.EasyAxes)
	case p.Particles < 0 || p.Particles > 100000:
		return fmt.Errorf("particles: must be within 0..100000, got %d", p.Particles)
	}
	return nil
}

// NewStonerWohlfarth returns an ensemble in the thermally demagnetized state:
// half of the moments along +easy axis, half along −easy axis (M = 0).
func NewStonerWohlfarth(p SWParams) *StonerWohlfarth {
	n := 1
	if p.EasyAxes == "random" {
		n = p.Particles
		if n <= 0 {
			n = 400
		}
	}
	s := &StonerWohlfarth{Params: p}
	// Each direction appears twice, once per sense of the moment, so the
	// ensemble starts at M = 0.
	for i := 0; i < n; i++ {
		psi := 0.0
		if n > 1 {
			// Midpoint rule in cos ψ: equal solid angle per particle.
			psi = math.Acos((float64(i) + 0.5) / float64(n))
		}
		s.psi = append(s.psi, psi, psi)
		s.theta = append(s.theta, psi, psi+math.Pi)
	}
	s.update()
	return s
}

// H returns the present field in A/m.
func (s *StonerWohlfarth) H() float64 { return s.h }

// M returns the present magnetization along the field in A/m.
func (s *StonerWohlfarth) M() float64 { return s.m }

// Drive moves the field to h (A/m) in steps of at most H_K/200, letting each
// moment relax into the local energy minimum it follows, and returns M.
func (s *StonerWohlfarth) Drive(h float64) float64 {
	dh := h - s.h
	if dh == 0 {
		return s.m
	}
	n := int(math.Ceil(math.Abs(dh) / (s.Params.HK / 200)))
	h0 := s.h
	for k := 1; k <= n; k++ {
		hr := (h0 + dh*float64(k)/float64(n)) / s.Params.HK
		for i := range s.theta {
			s.theta[i] = relax(s.theta[i], s.psi[i], hr)
		}
	}
	s.h = h
	s.update()
	return s.m
}

func (s *StonerWohlfarth) update() {
	sum := 0.0
	for _, t := range s.theta {
		sum += math.Cos(t)
	}
	s.m = s.Params.Ms * sum / float64(len(s.theta))
}

// relax descends e(θ) = ½·sin²(θ−ψ) − h·cos θ from θ to the local minimum it
// falls into: Newton steps where the energy is convex, bounded downhill
// steps where it is not (so a moment leaving an unstable point or a vanished
// minimum swings into the remaining one).
func relax(theta, psi, h float64) float64 {
	const maxStep = 0.3
	for it := 0; it < 200; it++ {
		g := 0.5*math.Sin(2*(theta-psi)) + h*math.Sin(theta)
		c := math.Cos(2*(theta-psi)) + h*math.Cos(theta)
		var d float64
		if c > 1e-9 {
			d = -g / c
			d = math.Max(-maxStep, math.Min(maxStep, d))
		} else if g != 0 {
			d = -math.Copysign(maxStep, g)
		} else {
			d = maxStep // on a maximum or saddle: leave it
		}
		theta += d
		if math.Abs(d) < 1e-12 {
			break
		}
	}
	return math.Remainder(theta, 2*math.Pi)
}
