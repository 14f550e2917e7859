package config

import (
	"fmt"
	"math"
	"regexp"

	"hystd/configs"
	"hystd/drivers/instr"
)

// LoadFixture reads and validates a fixture file.
func LoadFixture(path string) (Fixture, error) {
	data, err := configs.ReadFile(path)
	if err != nil {
		return Fixture{}, err
	}
	return ParseFixture(path, data)
}

// ParseFixture decodes and validates a fixture document; file names it in errors.
func ParseFixture(file string, data []byte) (Fixture, error) {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return Fixture{}, err
	}
	return FixtureFrom(doc)
}

// FixtureFrom decodes and validates a parsed fixture document.
func FixtureFrom(doc *configs.Doc) (Fixture, error) {
	var f Fixture
	if err := doc.Decode(&f); err != nil {
		return Fixture{}, err
	}
	if es := f.validate(doc); len(es) > 0 {
		return Fixture{}, es
	}
	return f, nil
}

// LoadSpecimen reads and validates a specimen file.
func LoadSpecimen(path string) (Specimen, error) {
	data, err := configs.ReadFile(path)
	if err != nil {
		return Specimen{}, err
	}
	return ParseSpecimen(path, data)
}

// ParseSpecimen decodes and validates a specimen document; file names it in errors.
func ParseSpecimen(file string, data []byte) (Specimen, error) {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return Specimen{}, err
	}
	return SpecimenFrom(doc)
}

// SpecimenFrom decodes and validates a parsed specimen document.
func SpecimenFrom(doc *configs.Doc) (Specimen, error) {
	var s Specimen
	if err := doc.Decode(&s); err != nil {
		return Specimen{}, err
	}
	if es := s.validate(doc); len(es) > 0 {
		return Specimen{}, es
	}
	return s, nil
}

// checker collects located problems for one document.
type checker struct {
	doc *configs.Doc
	es  configs.Errors
}

func (c *checker) add(path, format string, args ...any) {
	c.es = append(c.es, c.doc.Errorf(path, format, args...))
}

func (c *checker) required(path, v string) {
	if v == "" {
		c.add(path, "required")
	}
}

// positive requires v > 0 and finite.
func (c *checker) positive(path string, v float64) {
	if !(v > 0) || math.IsInf(v, 0) {
		c.add(path, "must be a positive number, got %v", v)
	}
}

// nonNegative requires v ≥ 0 and finite.
func (c *checker) nonNegative(path string, v float64) {
	if !(v >= 0) || math.IsInf(v, 0) {
		c.add(path, "must not be negative, got %v", v)
	}
}

func (c *checker) oneOf(path, v string, allowed ...string) {
	for _, a := range allowed {
		if v == a {
			return
		}
	}
	if v == "" {
		c.add(path, "required, one of %v", allowed)
		return
	}
	c.add(path, "%q is not one of %v", v, allowed)
}

func (c *checker) kind(got, want string) {
	if got != want {
		c.add("kind", "want %q, got %q", want, got)
	}
}

var nameRE = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$`)

func (c *checker) name(path, v string) {
	if v == "" {
		c.add(path, "required")
	} else if !nameRE.MatchString(v) {
		c.add(path, "%q: use letters, digits, '.', '_' and '-' (at most 64)", v)
	}
}

func (f *Fixture) validate(doc *configs.Doc) configs.Errors {
	c := &checker{doc: doc}
	c.kind(f.Kind, "fixture")
	c.name("name", f.Name)
	for role, in := range f.Instruments {
		p := "instruments." + role
		c.oneOf(p, role, instr.RoleSupply, instr.RoleIntegrator, instr.RoleFieldMeter, instr.RoleThermometer)
		if in.Port == "" && in.USB == nil {
			c.add(p, "needs a port (device path) or usb (vid, pid, serial)")
		}
		if in.Port != "" && in.USB != nil {
			c.add(p, "give a port or usb, not both")
		}
		if in.USB != nil && (in.USB.VID == "" || in.USB.PID == "") {
			c.add(p+".usb", "needs vid and pid")
		}
		c.required(p+".profile", in.Profile)
		if in.Baud < 0 {
			c.add(p+".baud", "must not be negative, got %d", in.Baud)
		}
	}
	for _, role := range []string{instr.RoleSupply, instr.RoleIntegrator} {
		if _, ok := f.Instruments[role]; !ok {
			c.add("instruments", "a %s is required", role)
		}
	}
	if f.Winding.N1 <= 0 {
		c.add("winding.n1", "must be a positive number of turns, got %d", f.Winding.N1)
	}
	if f.Winding.N2 <= 0 {
		c.add("winding.n2", "must be a positive number of turns, got %d", f.Winding.N2)
	}
	c.nonNegative("winding.coil_area_mm2", f.Winding.CoilAreaMM2)
	c.nonNegative("winding.resistance_ohm", f.Winding.ResistanceOhm)
	c.nonNegative("winding.inductance_h", f.Winding.InductanceH)
	c.oneOf("h_from", f.HFrom, "current", "field_meter")
	if _, ok := f.Instruments[instr.RoleFieldMeter]; f.HFrom == "field_meter" && !ok {
		c.add("h_from", "field_meter needs an instruments.field_meter")
	}
	l := f.Limits
	c.positive("limits.max_current_a", l.MaxCurrentA)
	c.positive("limits.max_voltage_v", l.MaxVoltageV)
	c.positive("limits.max_slew_a_per_s", l.MaxSlewAPerS)
	c.nonNegative("limits.max_winding_temp_c", l.MaxWindingTempC)
	c.nonNegative("limits.max_resistance_rise", l.MaxResistanceRise)
	c.nonNegative("limits.max_field_t", l.MaxFieldT)
	if l.MaxWindingTempC > 0 {
		if _, ok := f.Instruments[instr.RoleThermometer]; !ok {
			c.add("limits.max_winding_temp_c", "needs an instruments.thermometer (or set 0 and use max_resistance_rise)")
		}
	}
	if l.MaxResistanceRise > 0 && f.Winding.ResistanceOhm == 0 {
		c.add("limits.max_resistance_rise", "needs winding.resistance_ohm")
	}
	if l.CommTimeout < 0 {
		c.add("limits.comm_timeout", "must not be negative")
	}
	return c.es
}

func (s *Specimen) validate(doc *configs.Doc) configs.Errors {
	c := &checker{doc: doc}
	c.kind(s.Kind, "specimen")
	c.name("id", s.ID)
	c.required("material", s.Material)
	c.oneOf("class", s.Class, "soft", "magnet")
	c.nonNegative("density_kg_m3", s.DensityKgM3)
	c.nonNegative("mass_kg", s.MassKg)
	s.checkShapeBlocks(c)
	if b := s.MuInitialBmT; b < 0 || b > MaxMuInitialBmT || math.IsNaN(b) {
		c.add("mu_initial_b_mt", "must be a low flux density in mT, above 0 and at most %d (0 or left out: %d mT), got %v", MaxMuInitialBmT, DefaultMuInitialBmT, b)
	}
	if t := s.Tolerances; t != nil {
		t.check(c)
	}
	s.checkShape(c)
	return c.es
}

// checkShapeBlocks checks that the shape is known and that its block, and
// no other, is given.
func (s *Specimen) checkShapeBlocks(c *checker) {
	blocks := map[string]bool{"ring": s.Ring != nil, "epstein": s.Epstein != nil, "strip": s.Strip != nil, "direct": s.Direct != nil}
	c.oneOf("shape", s.Shape, "ring", "epstein", "strip", "direct")
	for name, given := range blocks {
		if name == s.Shape && !given {
			c.add("shape", "needs an %s block", name)
		}
		if name != s.Shape && given {
			c.add(name, "given, but shape is %q", s.Shape)
		}
	}
}

// check checks the tolerances of the specimen's dimensions.
func (t *Tolerances) check(c *checker) {
	tol := func(key string, v *float64, max float64, unit string) {
		if v != nil && (*v < 0 || *v > max || math.IsNaN(*v)) {
			c.add("tolerances."+key, "must be from 0 (exact) to %g %s, got %v", max, unit, *v)
		}
	}
	tol("length_mm", t.LengthMM, MaxLengthTolMM, "mm")
	tol("mass_g", t.MassG, MaxMassTolG, "g")
	tol("density_pct", t.DensityPct, MaxDensityTolPct, "%")
}

// checkShape checks the block of the specimen's shape.
func (s *Specimen) checkShape(c *checker) {
	switch {
	case s.Shape == "ring" && s.Ring != nil:
		s.Ring.check(c)
	case s.Shape == "epstein" && s.Epstein != nil:
		c.positive("epstein.strip_length_m", s.Epstein.StripLengthM)
		if s.Epstein.Strips <= 0 || s.Epstein.Strips%4 != 0 {
			c.add("epstein.strips", "must be a positive multiple of 4, got %d", s.Epstein.Strips)
		}
		c.positive("mass_kg", s.MassKg)
		c.positive("density_kg_m3", s.DensityKgM3)
	case s.Shape == "strip" && s.Strip != nil:
		c.positive("strip.length_m", s.Strip.LengthM)
		c.nonNegative("strip.path_length_m", s.Strip.PathLengthM)
		demag(c, "strip.demag_factor", s.Strip.DemagFactor)
		c.positive("mass_kg", s.MassKg)
		c.positive("density_kg_m3", s.DensityKgM3)
	case s.Shape == "direct" && s.Direct != nil:
		c.positive("direct.path_length_mm", s.Direct.PathLengthMM)
		c.positive("direct.area_mm2", s.Direct.AreaMM2)
		demag(c, "direct.demag_factor", s.Direct.DemagFactor)
	}
}

// check checks a ring's dimensions, path and stacking factor.
func (r *Ring) check(c *checker) {
	c.positive("ring.outer_diameter_mm", r.OuterMM)
	c.positive("ring.inner_diameter_mm", r.InnerMM)
	c.positive("ring.height_mm", r.HeightMM)
	if r.InnerMM >= r.OuterMM && r.OuterMM > 0 {
		c.add("ring.inner_diameter_mm", "must be smaller than outer_diameter_mm (%v ≥ %v)", r.InnerMM, r.OuterMM)
	}
	c.oneOf("ring.path", r.Path, "mean", "effective")
	if r.StackingFactor < 0 || r.StackingFactor > 1 {
		c.add("ring.stacking_factor", "must be in (0, 1], got %v", r.StackingFactor)
	}
}

func demag(c *checker, path string, n float64) {
	if n < 0 || n >= 1 {
		c.add(path, "a demagnetizing factor is in [0, 1), got %v", n)
	}
}

// String gives a one-line summary for logs.
func (f Fixture) String() string {
	return fmt.Sprintf("fixture %s (N1 %d, N2 %d, H from %s, ≤ %g A)", f.Name, f.Winding.N1, f.Winding.N2, f.HFrom, f.Limits.MaxCurrentA)
}
