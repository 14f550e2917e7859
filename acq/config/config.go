// Package config defines the fixture and specimen configuration of hystd and
// loads them strictly (see package configs for the loader and its error
// format). A loaded config is an immutable value: callers receive copies.
package config

import "hystd/configs"

// Fixture is one test fixture: its instruments, windings and limits.
type Fixture struct {
	Kind        string                `yaml:"kind"` // "fixture"
	Name        string                `yaml:"name"`
	Description string                `yaml:"description"`
	Instruments map[string]Instrument `yaml:"instruments"` // by role
	Winding     Winding               `yaml:"winding"`
	// HFrom says how H is obtained: "current" (H = N1·I/l_m, closed magnetic
	// circuits) or "field_meter" (H = B_probe/μ0 beside the specimen, yokes).
	HFrom  string `yaml:"h_from"`
	Limits Limits `yaml:"limits"`
}

// Instrument says where one instrument is and which profile speaks to it.
type Instrument struct {
	// Port is a device path (/dev/ttyUSB0, /dev/serial/by-id/...); or USB
	// names the adapter by identity. One of the two is required.
	Port    string       `yaml:"port"`
	USB     *USBIdentity `yaml:"usb"`
	Profile string       `yaml:"profile"` // profile name in configs/instruments, or a path to a profile file
	// Baud overrides the profile's baud rate when non-zero.
	Baud int `yaml:"baud"`
	// Identity overrides the substring the *IDN? reply must contain.
	Identity string `yaml:"identity"`
}

// USBIdentity finds a USB serial adapter by its descriptor, compared
// case-insensitively.
type USBIdentity struct {
	VID    string `yaml:"vid"`
	PID    string `yaml:"pid"`
	Serial string `yaml:"serial"`
}

// Winding holds the turns and the search-coil area of the fixture.
type Winding struct {
	N1 int `yaml:"n1"` // magnetizing turns
	N2 int `yaml:"n2"` // sensing (search-coil) turns
	// CoilAreaMM2 is the area enclosed by one sensing turn, mm²; when larger
	// than the specimen's cross-section the air flux is corrected. 0: equal
	// to the specimen's area (coil wound tight on the specimen).
	CoilAreaMM2 float64 `yaml:"coil_area_mm2"`
	// ResistanceOhm is the magnetizing winding's resistance at 20 °C, used to
	// watch its heating from V/I; 0 disables that check.
	ResistanceOhm float64 `yaml:"resistance_ohm"`
	// InductanceH is the winding's inductance estimate, for the stored-energy caution.
	InductanceH float64 `yaml:"inductance_h"`
}

// Limits are the fixture's hard limits; a run that would cross one is
// refused, a run that crosses one is ended after a safe ramp-down.
type Limits struct {
	MaxCurrentA       float64          `yaml:"max_current_a"`
	MaxVoltageV       float64          `yaml:"max_voltage_v"`
	MaxSlewAPerS      float64          `yaml:"max_slew_a_per_s"`
	MaxWindingTempC   float64          `yaml:"max_winding_temp_c"`  // 0: no thermometer check
	MaxResistanceRise float64          `yaml:"max_resistance_rise"` // fraction, e.g. 0.15; 0: no check
	MaxFieldT         float64          `yaml:"max_field_t"`         // field-meter reading; 0: no check
	CommTimeout       configs.Duration `yaml:"comm_timeout"`        // no reply within this ends the run
}

// Specimen is one specimen with its shape and material.
type Specimen struct {
	Kind     string `yaml:"kind"` // "specimen"
	ID       string `yaml:"id"`
	Material string `yaml:"material"`
	// Class is "soft" or "magnet": which figures are reported.
	Class string `yaml:"class"`
	Note  string `yaml:"note"`
	// Grade names the material grade (a `kind: grade` file) the specimen is
	// judged against; "" for none.
	Grade string `yaml:"grade"`
	// Shape is one of ring, epstein, strip, direct; the matching block below is required.
	Shape   string   `yaml:"shape"`
	Ring    *Ring    `yaml:"ring"`
	Epstein *Epstein `yaml:"epstein"`
	Strip   *Strip   `yaml:"strip"`
	Direct  *Direct  `yaml:"direct"`
	// DensityKgM3 is needed for Epstein and strip areas and for loss per kg.
	DensityKgM3 float64 `yaml:"density_kg_m3"`
	MassKg      float64 `yaml:"mass_kg"`
	// Tolerances says how well the dimensions, mass and density are known,
	// for the uncertainty budget; nil (or a key left out) takes the
	// common-practice defaults of DefaultTolerances.
	Tolerances *Tolerances `yaml:"tolerances"`
	// MuInitialBmT is the flux density in mT at which μ_initial is read on
	// the initial curve; 0 means DefaultMuInitialBmT.
	MuInitialBmT float64 `yaml:"mu_initial_b_mt"`
}

// DefaultMuInitialBmT is the flux density (mT) at which μ_initial is read
// unless the specimen says otherwise: 4 mT, usual for Ni-Fe alloys (REFERENCE
// §3, from memory). Electrical steels are often quoted at other low levels;
// set mu_initial_b_mt to the level the material's standard or grade uses.
const DefaultMuInitialBmT = 4

// MaxMuInitialBmT bounds mu_initial_b_mt: μ_initial is the permeability at
// low induction; above 100 mT the figure is no longer "initial" for any
// soft material.
const MaxMuInitialBmT = 100

// Tolerances are the half-widths of the readings of the specimen's
// dimensions and mass (rectangular distributions: standard uncertainty
// u = a/√3) and the relative standard uncertainty of a tabulated density.
// A key left out takes its default; 0 declares the input exact.
type Tolerances struct {
	// LengthMM is ± of every length measured (diameters, height, strip
	// length), in mm; default 0.02 (a caliper, common practice).
	LengthMM *float64 `yaml:"length_mm"`
	// MassG is ± of the weighed mass, in g; default 0.01 (a lab balance,
	// common practice).
	MassG *float64 `yaml:"mass_g"`
	// DensityPct is the standard uncertainty of the density, in % of it;
	// default 0.5 (a value from a material table, common practice).
	DensityPct *float64 `yaml:"density_pct"`
}

// Default tolerances, common practice [trade]: see Tolerances.
const (
	DefaultLengthTolMM   = 0.02
	DefaultMassTolG      = 0.01
	DefaultDensityTolPct = 0.5
)

// Bounds of the tolerances: beyond them a value is taken for a unit slip.
const (
	MaxLengthTolMM   = 10
	MaxMassTolG      = 100
	MaxDensityTolPct = 20
)

// Tol returns the tolerances with the defaults filled in: length (mm) and
// mass (g) half-widths, density standard uncertainty (%).
func (t *Tolerances) Tol() (lengthMM, massG, densityPct float64) {
	lengthMM, massG, densityPct = DefaultLengthTolMM, DefaultMassTolG, DefaultDensityTolPct
	if t == nil {
		return
	}
	if t.LengthMM != nil {
		lengthMM = *t.LengthMM
	}
	if t.MassG != nil {
		massG = *t.MassG
	}
	if t.DensityPct != nil {
		densityPct = *t.DensityPct
	}
	return
}

// MuInitialB returns the flux density (T) at which μ_initial is read.
func (s Specimen) MuInitialB() float64 {
	if s.MuInitialBmT == 0 {
		return DefaultMuInitialBmT * 1e-3
	}
	return s.MuInitialBmT * 1e-3
}

// Ring is a toroidal specimen (IEC 60404-4).
type Ring struct {
	OuterMM  float64 `yaml:"outer_diameter_mm"`
	InnerMM  float64 `yaml:"inner_diameter_mm"`
	HeightMM float64 `yaml:"height_mm"`
	// Path is "mean" (π(D+d)/2, IEC 60404-4) or "effective" (IEC 60205 l_e, A_e).
	Path string `yaml:"path"`
	// StackingFactor is the fraction of the height that is metal (laminated
	// or tape-wound rings); 0 means 1.
	StackingFactor float64 `yaml:"stacking_factor"`
}

// Epstein is an Epstein-square specimen (IEC 60404-2, conventional l_m = 0.94 m).
type Epstein struct {
	StripLengthM float64 `yaml:"strip_length_m"`
	Strips       int     `yaml:"strips"` // a multiple of 4
}

// Strip is a strip or rod whose area comes from mass, length and density.
type Strip struct {
	LengthM     float64 `yaml:"length_m"`
	PathLengthM float64 `yaml:"path_length_m"` // magnetic path; 0 means LengthM
	// DemagFactor is the demagnetizing factor N for an open specimen; 0: none.
	DemagFactor float64 `yaml:"demag_factor"`
}

// Direct gives the effective magnetic path length and area directly.
type Direct struct {
	PathLengthMM float64 `yaml:"path_length_mm"`
	AreaMM2      float64 `yaml:"area_mm2"`
	DemagFactor  float64 `yaml:"demag_factor"`
}
