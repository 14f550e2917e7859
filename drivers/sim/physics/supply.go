package physics

import (
	"fmt"
	"math"
)

// CopperTempCoeff is the temperature coefficient of copper resistance near
// 20 °C, 1/K (+0.39 %/K, common practice; handbook value 0.00393).
const CopperTempCoeff = 0.0039

// WindingParams describe the magnetizing and sensing windings of the fixture.
type WindingParams struct {
	N1 int `yaml:"n1"` // magnetizing turns
	N2 int `yaml:"n2"` // search-coil turns
	// CoilAreaMM2 is the area enclosed by one search-coil turn; 0 means the
	// specimen's cross-section (coil wound tight).
	CoilAreaMM2   float64 `yaml:"coil_area_mm2"`
	ResistanceOhm float64 `yaml:"resistance_ohm"` // at 20 °C
	InductanceH   float64 `yaml:"inductance_h"`
	// Thermal model: C·dT/dt = I²·R − (T − T_ambient)/R_th.
	HeatCapacityJPerK   float64 `yaml:"heat_capacity_j_per_k"`
	ThermalResistanceKW float64 `yaml:"thermal_resistance_k_per_w"`
	AmbientC            float64 `yaml:"ambient_c"`
}

// Validate reports the first bad value, naming its key.
func (w WindingParams) Validate() error {
	switch {
	case w.N1 <= 0:
		return fmt.Errorf("n1: must be > 0, got %d", w.N1)
	case w.N2 <= 0:
		return fmt.Errorf("n2: must be > 0, got %d", w.N2)
	case w.CoilAreaMM2 < 0:
		return fmt.Errorf("coil_area_mm2: must be >= 0, got %g", w.CoilAreaMM2)
	case !(w.ResistanceOhm > 0):
		return fmt.Errorf("resistance_ohm: must be > 0, got %g", w.ResistanceOhm)
	case !(w.InductanceH > 0):
		return fmt.Errorf("inductance_h: must be > 0, got %g", w.InductanceH)
	case !(w.HeatCapacityJPerK > 0):
		return fmt.Errorf("heat_capacity_j_per_k: must be > 0, got %g", w.HeatCapacityJPerK)
	case !(w.ThermalResistanceKW > 0):
		return fmt.Errorf("thermal_resistance_k_per_w: must be > 0, got %g", w.ThermalResistanceKW)
	case w.AmbientC < -50 || w.AmbientC > 100:
		return fmt.Errorf("ambient_c: must be within -50..100 °C, got %g", w.AmbientC)
	}
	return nil
}

// SupplyParams describe the bipolar current supply.
type SupplyParams struct {
	MaxCurrentA float64 `yaml:"max_current_a"` // |setpoint| above is refused
	ComplianceV float64 `yaml:"compliance_v"`  // output voltage limit
	SlewAPerS   float64 `yaml:"slew_a_per_s"`  // current slew limit
	OverTempC   float64 `yaml:"overtemp_c"`    // winding temperature that sets the warning bit
	TripC       float64 `yaml:"trip_c"`        // winding temperature that trips the output
}

// Validate reports the first bad value, naming its key.
func (s SupplyParams) Validate() error {
	switch {
	case !(s.MaxCurrentA > 0):
		return fmt.Errorf("max_current_a: must be > 0, got %g", s.MaxCurrentA)
	case !(s.ComplianceV > 0):
		return fmt.Errorf("compliance_v: must be > 0, got %g", s.ComplianceV)
	case !(s.SlewAPerS > 0):
		return fmt.Errorf("slew_a_per_s: must be > 0, got %g", s.SlewAPerS)
	case !(s.TripC > s.OverTempC):
		return fmt.Errorf("trip_c: must be above overtemp_c (%g), got %g", s.OverTempC, s.TripC)
	}
	return nil
}

// Supply is the state of the current supply driving the winding. The output
// current follows the setpoint at the slew limit while the voltage
// R(T)·I + L·dI/dt stays within compliance; beyond it, the voltage is held
// at compliance and the current lags (Compliance is set). When the winding
// reaches TripC the supply trips: output off (latched until ClearTrip), and
// the current ramps to zero at the slew limit.
type Supply struct {
	P SupplyParams
	W WindingParams

	Setpoint   float64 // A
	Output     bool
	I          float64 // A, actual
	V          float64 // V, at the terminals
	TempC      float64 // winding temperature
	Compliance bool
	OverTemp   bool
	Tripped    bool
	// Ramp, A/s of bench time, is a programmed ramp rate (0: none): the
	// current then moves towards the setpoint at no more than this rate
	// (and the slew limit).
	Ramp float64
}

// NewSupply returns a supply at zero current, output off, winding at ambient.
func NewSupply(p SupplyParams, w WindingParams) *Supply {
	return &Supply{P: p, W: w, TempC: w.AmbientC}
}

// Resistance returns the winding resistance at its present temperature, Ω.
func (s *Supply) Resistance() float64 {
	return s.W.ResistanceOhm * (1 + CopperTempCoeff*(s.TempC-20))
}

// Step advances the supply and winding by dt seconds.
func (s *Supply) Step(dt float64) {
	if dt <= 0 {
		return
	}
	target := 0.0
	if s.Output && !s.Tripped {
		target = s.Setpoint
	}
	r, l := s.Resistance(), s.W.InductanceH
	max := s.P.SlewAPerS * dt
	if s.Ramp > 0 && s.Output && !s.Tripped {
		max = math.Min(max, s.Ramp*dt)
	}
	di := math.Max(-max, math.Min(max, target-s.I))
	v := r*(s.I+di) + l*di/dt
	s.Compliance = false
	if math.Abs(v) > s.P.ComplianceV {
		v = math.Copysign(s.P.ComplianceV, v)
		di = (v - r*s.I) / (r + l/dt)
		s.Compliance = true
	}
	s.I += di
	s.V = v
	p := s.I * s.I * r
	s.TempC += dt * (p - (s.TempC-s.W.AmbientC)/s.W.ThermalResistanceKW) / s.W.HeatCapacityJPerK
	s.OverTemp = s.TempC >= s.P.OverTempC
	if s.TempC >= s.P.TripC && !s.Tripped {
		s.Trip()
	}
}

// Trip shuts the output down as the supply's own protection does.
func (s *Supply) Trip() {
	s.Tripped = true
	s.Output = false
	s.Ramp = 0
}

// ClearTrip re-arms the supply when the winding is below the warning
// temperature; it reports whether it did.
func (s *Supply) ClearTrip() bool {
	if s.TempC >= s.P.OverTempC {
		return false
	}
	s.Tripped = false
	return true
}
