package physics

import (
	"fmt"
	"math"
)

// IntegratorParams describe the electronic integrator on the search coil.
type IntegratorParams struct {
	// OffsetV is the input offset voltage; it integrates into a baseline
	// that grows as OffsetV·t since the last reset (V·s).
	OffsetV   float64 `yaml:"offset_v"`
	GainError float64 `yaml:"gain_error"` // reading = (1+GainError)·Δψ + …
	NoiseWb   float64 `yaml:"noise_wb"`   // rms noise per reading, Wb-turns
	RangeWb   float64 `yaml:"range_wb"`   // full scale at power-on, Wb-turns
}

// Validate reports the first bad value, naming its key.
func (p IntegratorParams) Validate() error {
	switch {
	case math.Abs(p.OffsetV) > 1:
		return fmt.Errorf("offset_v: must be within ±1 V, got %g", p.OffsetV)
	case math.Abs(p.GainError) >= 0.5:
		return fmt.Errorf("gain_error: must be within ±0.5, got %g", p.GainError)
	case p.NoiseWb < 0:
		return fmt.Errorf("noise_wb: must be >= 0, got %g", p.NoiseWb)
	case !(p.RangeWb > 0):
		return fmt.Errorf("range_wb: must be > 0, got %g", p.RangeWb)
	}
	return nil
}

// Integrator is the state of the integrator: reading =
// (1+GainError)·(ψ − ψ_reset) + OffsetV·(t − t_reset) + noise, clipped to
// ±Range with Overload latched until the next Reset.
type Integrator struct {
	P        IntegratorParams
	Range    float64 // Wb-turns
	Overload bool

	psi0, t0 float64
}

// NewIntegrator returns an integrator reset at time t with true linkage psi.
func NewIntegrator(p IntegratorParams, psi, t float64) *Integrator {
	return &Integrator{P: p, Range: p.RangeWb, psi0: psi, t0: t}
}

// Reset zeroes the reading at time t (s) with true linkage psi (Wb-turns).
func (g *Integrator) Reset(psi, t float64) { g.psi0, g.t0, g.Overload = psi, t, false }

// clean is the noise-free reading before clipping.
func (g *Integrator) clean(psi, t float64) float64 {
	return (1+g.P.GainError)*(psi-g.psi0) + g.P.OffsetV*(t-g.t0)
}

// Watch latches Overload when the noise-free reading leaves the range.
func (g *Integrator) Watch(psi, t float64) {
	if math.Abs(g.clean(psi, t)) > g.Range {
		g.Overload = true
	}
}

// Read returns the reading with noise (noise is a standard normal sample).
func (g *Integrator) Read(psi, t, noise float64) float64 {
	v := g.clean(psi, t) + g.P.NoiseWb*noise
	if math.Abs(v) > g.Range {
		g.Overload = true
		v = math.Copysign(g.Range, v)
	}
	return v
}

// FieldMeterParams describe the Hall-probe field meter.
type FieldMeterParams struct {
	OffsetT          float64 `yaml:"offset_t"`
	SensitivityError float64 `yaml:"sensitivity_error"` // reading = (1+e)·μ0·H + offset
	NoiseT           float64 `yaml:"noise_t"`           // rms per reading
	RangeT           float64 `yaml:"range_t"`           // full scale at power-on
}

// Validate reports the first bad value, naming its key.
func (p FieldMeterParams) Validate() error {
	switch {
	case math.Abs(p.OffsetT) > 0.1:
		return fmt.Errorf("offset_t: must be within ±0.1 T, got %g", p.OffsetT)
	case math.Abs(p.SensitivityError) >= 0.5:
		return fmt.Errorf("sensitivity_error: must be within ±0.5, got %g", p.SensitivityError)
	case p.NoiseT < 0:
		return fmt.Errorf("noise_t: must be >= 0, got %g", p.NoiseT)
	case !(p.RangeT > 0):
		return fmt.Errorf("range_t: must be > 0, got %g", p.RangeT)
	}
	return nil
}

// FieldMeter is the state of the field meter. Read returns
// (1+SensitivityError)·B_probe + OffsetT − zero + noise, where B_probe =
// μ0·H at the probe, and reports over-range beyond ±Range.
type FieldMeter struct {
	P     FieldMeterParams
	Range float64
	zero  float64
}

// NewFieldMeter returns a meter at its power-on range, not zeroed.
func NewFieldMeter(p FieldMeterParams) *FieldMeter { return &FieldMeter{P: p, Range: p.RangeT} }

func (f *FieldMeter) clean(bProbe float64) float64 {
	return (1+f.P.SensitivityError)*bProbe + f.P.OffsetT - f.zero
}

// Zero nulls the present noise-free reading (meant for a zero-field chamber:
// zeroing in a field makes that field read as zero).
func (f *FieldMeter) Zero(bProbe float64) { f.zero += f.clean(bProbe) }

// Read returns the reading in T and whether it is within range.
func (f *FieldMeter) Read(bProbe, noise float64) (float64, bool) {
	v := f.clean(bProbe) + f.P.NoiseT*noise
	return v, math.Abs(v) <= f.Range
}

// EddyParams give the classical eddy-current field of a lamination of
// thickness d and conductivity σ: H_eddy = (σ·d²/12)·dB/dt, the field whose
// work H_eddy·dB/dt equals the classical eddy loss σ·d²·(dB/dt)²/12 per unit
// volume (textbook result for a thin sheet in a uniform field).
type EddyParams struct {
	ConductivitySM float64 `yaml:"conductivity_s_m"`
	ThicknessMM    float64 `yaml:"thickness_mm"`
}

// Coefficient returns σ·d²/12 in (A/m)/(T/s).
func (e EddyParams) Coefficient() float64 {
	d := e.ThicknessMM / 1e3
	return e.ConductivitySM * d * d / 12
}

// Validate reports the first bad value, naming its key.
func (e EddyParams) Validate() error {
	switch {
	case !(e.ConductivitySM > 0):
		return fmt.Errorf("conductivity_s_m: must be > 0, got %g", e.ConductivitySM)
	case !(e.ThicknessMM > 0):
		return fmt.Errorf("thickness_mm: must be > 0, got %g", e.ThicknessMM)
	}
	return nil
}
