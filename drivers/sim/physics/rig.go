package physics

import (
	"fmt"
	"math"

	"hystd/calib/units"
)

// Model is a specimen's magnetization law: Drive moves the internal field
// to h (A/m) and returns M (A/m).
type Model interface {
	Drive(h float64) float64
	H() float64
	M() float64
}

// SpecimenParams choose the specimen's model, geometry and eddy currents.
type SpecimenParams struct {
	Model           string      `yaml:"model"` // jiles-atherton | stoner-wohlfarth
	Geometry        Geometry    `yaml:"geometry"`
	JilesAtherton   *JAParams   `yaml:"jiles_atherton"`
	StonerWohlfarth *SWParams   `yaml:"stoner_wohlfarth"`
	Eddy            *EddyParams `yaml:"eddy"` // nil: no eddy currents
}

// ThermometerParams describe the winding thermometer.
type ThermometerParams struct {
	OffsetC float64 `yaml:"offset_c"`
	NoiseC  float64 `yaml:"noise_c"`
}

// RigParams are all the physical parameters of a bench.
type RigParams struct {
	Winding     WindingParams     `yaml:"winding"`
	Supply      SupplyParams      `yaml:"supply"`
	Specimen    SpecimenParams    `yaml:"specimen"`
	Integrator  IntegratorParams  `yaml:"integrator"`
	FieldMeter  FieldMeterParams  `yaml:"field_meter"`
	Thermometer ThermometerParams `yaml:"thermometer"`
}

// Validate checks every section; the error text starts with the dotted key
// ("specimen.jiles_atherton.k_a_m: must be > 0, got 0").
func (p RigParams) Validate() error {
	check := func(section string, err error) error {
		if err != nil {
			return fmt.Errorf("%s.%w", section, err)
		}
		return nil
	}
	if err := check("winding", p.Winding.Validate()); err != nil {
		return err
	}
	if err := check("supply", p.Supply.Validate()); err != nil {
		return err
	}
	if _, _, err := p.Specimen.Geometry.Resolve(); err != nil {
		return check("specimen.geometry", err)
	}
	switch p.Specimen.Model {
	case "jiles-atherton":
		if p.Specimen.JilesAtherton == nil {
			return fmt.Errorf("specimen.jiles_atherton: missing for model jiles-atherton")
		}
		if err := check("specimen.jiles_atherton", p.Specimen.JilesAtherton.Validate()); err != nil {
			return err
		}
	case "stoner-wohlfarth":
		if p.Specimen.StonerWohlfarth == nil {
			return fmt.Errorf("specimen.stoner_wohlfarth: missing for model stoner-wohlfarth")
		}
		if err := check("specimen.stoner_wohlfarth", p.Specimen.StonerWohlfarth.Validate()); err != nil {
			return err
		}
	default:
		return fmt.Errorf("specimen.model: must be jiles-atherton or stoner-wohlfarth, got %q", p.Specimen.Model)
	}
	if p.Specimen.Eddy != nil {
		if err := check("specimen.eddy", p.Specimen.Eddy.Validate()); err != nil {
			return err
		}
	}
	if err := check("integrator", p.Integrator.Validate()); err != nil {
		return err
	}
	if err := check("field_meter", p.FieldMeter.Validate()); err != nil {
		return err
	}
	if p.Thermometer.NoiseC < 0 {
		return fmt.Errorf("thermometer.noise_c: must be >= 0, got %g", p.Thermometer.NoiseC)
	}
	return nil
}

// State is the true physical state of a rig at one instant.
type State struct {
	T        float64 // s since the rig was made
	Setpoint float64 // A
	I        float64 // A, winding current
	V        float64 // V, supply terminals
	R        float64 // Ω, winding resistance now
	TempC    float64 // winding temperature
	Output   bool
	Compl    bool // supply in voltage compliance
	OverTemp bool
	Tripped  bool
	H        float64 // A/m, applied field N1·I/l_m (what Ampère's law gives)
	HCore    float64 // A/m, field the material sees (H minus the eddy-current field)
	M        float64 // A/m
	B        float64 // T, μ0·(HCore + M)
	J        float64 // T, μ0·M
	Psi      float64 // Wb-turns through the search coil
}

// Rig is a whole fixture: supply, winding, specimen and sensors. Step
// advances it; the instrument methods read it as the instruments would. A
// Rig is not safe for concurrent use.
type Rig struct {
	P          RigParams
	Supply     *Supply
	Integrator *Integrator
	FieldMeter *FieldMeter
	spec       Model

	lm, area, coilArea, kEddy float64
	t, hApp, hCore, b, mud    float64
}

// NewRig validates p and returns a rig at rest: zero current, specimen in
// its virgin (JA) or demagnetized (SW) state, integrator reset.
func NewRig(p RigParams) (*Rig, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	lm, area, _ := p.Specimen.Geometry.Resolve()
	r := &Rig{P: p, lm: lm, area: area, coilArea: area, mud: units.Mu0}
	if p.Winding.CoilAreaMM2 > 0 {
		r.coilArea = p.Winding.CoilAreaMM2 / 1e6
	}
	if p.Specimen.Eddy != nil {
		r.kEddy = p.Specimen.Eddy.Coefficient()
	}
	switch p.Specimen.Model {
	case "jiles-atherton":
		r.spec = NewJilesAtherton(*p.Specimen.JilesAtherton)
	default:
		r.spec = NewStonerWohlfarth(*p.Specimen.StonerWohlfarth)
	}
	r.Supply = NewSupply(p.Supply, p.Winding)
	r.Integrator = NewIntegrator(p.Integrator, 0, 0)
	r.FieldMeter = NewFieldMeter(p.FieldMeter)
	return r, nil
}

// PathLength returns l_m (m).
func (r *Rig) PathLength() float64 { return r.lm }

// Time returns the rig's time in s.
func (r *Rig) Time() float64 { return r.t }

// Step advances the rig by dt seconds. With eddy currents the material field
// is found semi-implicitly from H_core = H − k·dB/dt with the last
// differential permeability, which is stable for any dt.
func (r *Rig) Step(dt float64) {
	if !(dt > 0) {
		return
	}
	r.Supply.Step(dt)
	r.t += dt
	r.hApp = float64(r.P.Winding.N1) * r.Supply.I / r.lm
	hc := r.hApp
	if r.kEddy > 0 {
		g := r.kEddy * r.mud / dt
		hc = (r.hApp + g*r.hCore) / (1 + g)
	}
	m := r.spec.Drive(hc)
	b := units.Mu0 * (hc + m)
	if dh := hc - r.hCore; math.Abs(dh) > 1e-9 {
		r.mud = math.Max(units.Mu0, math.Min(1e6*units.Mu0, (b-r.b)/dh))
	}
	r.hCore, r.b = hc, b
	r.Integrator.Watch(r.Psi(), r.t)
}

// Psi returns the true flux linkage of the search coil,
// ψ = N2·(B·A + μ0·H·(A_c − A)), in Wb-turns.
func (r *Rig) Psi() float64 {
	return float64(r.P.Winding.N2) * (r.b*r.area + units.Mu0*r.hApp*(r.coilArea-r.area))
}

// State returns the true state now.
func (r *Rig) State() State {
	s := r.Supply
	m := r.spec.M()
	return State{
		T: r.t, Setpoint: s.Setpoint, I: s.I, V: s.V, R: s.Resistance(), TempC: s.TempC,
		Output: s.Output, Compl: s.Compliance, OverTemp: s.OverTemp, Tripped: s.Tripped,
		H: r.hApp, HCore: r.hCore, M: m, B: r.b, J: units.Mu0 * m, Psi: r.Psi(),
	}
}

// ResetIntegrator zeroes the integrator now.
func (r *Rig) ResetIntegrator() { r.Integrator.Reset(r.Psi(), r.t) }

// ReadFlux returns the integrator reading (noise: a standard normal sample).
func (r *Rig) ReadFlux(noise float64) float64 { return r.Integrator.Read(r.Psi(), r.t, noise) }

// ProbeField returns the true μ0·H at the Hall probe, T.
func (r *Rig) ProbeField() float64 { return units.Mu0 * r.hApp }

// ReadField returns the field-meter reading and whether it is in range.
func (r *Rig) ReadField(noise float64) (float64, bool) {
	return r.FieldMeter.Read(r.ProbeField(), noise)
}

// ZeroField nulls the field meter at the present field.
func (r *Rig) ZeroField() { r.FieldMeter.Zero(r.ProbeField()) }

// ReadTemperature returns the thermometer reading, °C.
func (r *Rig) ReadTemperature(noise float64) float64 {
	return r.Supply.TempC + r.P.Thermometer.OffsetC + r.P.Thermometer.NoiseC*noise
}
