package physics

import (
	"fmt"
	"math"
)

// JilesAtherton is a Jiles–Atherton hysteresis model in the form of Jiles,
// Thoelke & Devine, IEEE Trans. Magn. 28(1):27 (1992), after Jiles &
// Atherton, JMMM 61 (1986) 48:
//
//	He    = H + α·M
//	M_an  = Ms·(coth(He/a) − a/He)
//	dM/dH = δ_M·(M_an − M) / ((1+c)·(δ·k − α·(M_an − M))) + (c/(1+c))·dM_an/dHe
//
// with δ = sign(dH/dt) and δ_M = 1 when (M_an − M)·δ > 0, else 0. The state
// is M (A/m) at the field H (A/m); Drive integrates dM/dH with classical
// RK4 in H. Fields are in A/m. A JilesAtherton is not safe for concurrent use.
type JilesAtherton struct {
	Params JAParams
	// MaxStep is the largest RK4 step in H, A/m (default 1 A/m).
	MaxStep float64

	h, m float64
}

// JAParams are the five Jiles–Atherton parameters.
type JAParams struct {
	Ms    float64 `yaml:"ms_a_m"` // saturation magnetization, A/m
	A     float64 `yaml:"a_a_m"`  // anhysteretic shape parameter, A/m
	K     float64 `yaml:"k_a_m"`  // pinning parameter, A/m
	C     float64 `yaml:"c"`      // reversibility, 0..1
	Alpha float64 `yaml:"alpha"`  // inter-domain coupling
}

// NewJilesAtherton returns a model in the virgin state (H = 0, M = 0).
func NewJilesAtherton(p JAParams) *JilesAtherton {
	return &JilesAtherton{Params: p, MaxStep: 1}
}

// langevin returns L(x) = coth(x) − 1/x and dL/dx.
func langevin(x float64) (l, dl float64) {
	ax := math.Abs(x)
	if ax < 1e-3 {
		// Series: L = x/3 − x³/45, L' = 1/3 − x²/15.
		return x/3 - x*x*x/45, 1.0/3 - x*x/15
	}
	if ax > 40 {
		return math.Copysign(1, x) - 1/x, 1 / (x * x)
	}
	s := math.Sinh(x)
	return 1/math.Tanh(x) - 1/x, 1/(x*x) - 1/(s*s)
}

func (j *JilesAtherton) slope(h, m, delta float64) float64 {
	p := j.Params
	he := h + p.Alpha*m
	l, dl := langevin(he / p.A)
	man := p.Ms * l
	dman := p.Ms * dl / p.A
	diff := man - m
	irr := 0.0
	if diff*delta > 0 {
		irr = diff / ((1 + p.C) * (delta*p.K - p.Alpha*diff))
	}
	return irr + p.C/(1+p.C)*dman
}

// H returns the present field in A/m.
func (j *JilesAtherton) H() float64 { return j.h }

// M returns the present magnetization in A/m.
func (j *JilesAtherton) M() float64 { return j.m }

// Reset returns the model to the virgin state.
func (j *JilesAtherton) Reset() { j.h, j.m = 0, 0 }

// Drive moves the field from its present value to h (A/m) in RK4 steps of
// at most MaxStep and returns the magnetization there. The direction δ is
// the sign of h − H for the whole move.
func (j *JilesAtherton) Drive(h float64) float64 {
	dh := h - j.h
	if dh == 0 {
		return j.m
	}
	step := j.MaxStep
	if step <= 0 {
		step = 1
	}
	n := int(math.Ceil(math.Abs(dh) / step))
	delta := math.Copysign(1, dh)
	s := dh / float64(n)
	hh, m := j.h, j.m
	for i := 0; i < n; i++ {
		k1 := j.slope(hh, m, delta)
		k2 := j.slope(hh+s/2, m+s/2*k1, delta)
		k3 := j.slope(hh+s/2, m+s/2*k2, delta)
		k4 := j.slope(hh+s, m+s*k3, delta)
		m += s / 6 * (k1 + 2*k2 + 2*k3 + k4)
		hh = j.h + float64(i+1)*s
	}
	j.h, j.m = h, m
	return m
}

// Validate reports the first parameter out of its domain.
func (p JAParams) Validate() error {
	switch {
	case !(p.Ms > 0):
		return fmt.Errorf("ms_a_m: must be > 0, got %g", p.Ms)
	case !(p.A > 0):
		return fmt.Errorf("a_a_m: must be > 0, got %g", p.A)
	case !(p.K > 0):
		return fmt.Errorf("k_a_m: must be > 0, got %g", p.K)
	case !(p.C >= 0 && p.C < 1):
		return fmt.Errorf("c: must be within [0, 1), got %g", p.C)
	case !(p.Alpha >= 0 && p.Alpha < 1):
		return fmt.Errorf("alpha: must be within [0, 1), got %g", p.Alpha)
	}
	return nil
}
