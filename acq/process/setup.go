package process

import (
	"fmt"
	"math"

	"hystd/acq/config"
	"hystd/calib/geometry"
	"hystd/calib/units"
	"hystd/drivers/instr"
)

const mm = 1e-3

// SetupFrom builds the Setup of a fixture and specimen: geometry from the
// specimen's shape block (with the specimen's tolerances for the budget), turns
// and search-coil area from the fixture's winding. Warnings (e.g. a ring
// wider than IEC 60404-4 admits) are returned for the run's events. Errors
// name the config key at fault. Instrument accuracies are added with
// SetAccuracy.
func SetupFrom(fx config.Fixture, sp config.Specimen) (Setup, []string, error) {
	s := Setup{
		N1: fx.Winding.N1, N2: fx.Winding.N2,
		CoilArea: units.SquareMetre(fx.Winding.CoilAreaMM2 * mm * mm),
		HFrom:    fx.HFrom, Class: sp.Class,
		Density: units.KilogramPerCubicMetre(sp.DensityKgM3), Mass: units.Kilogram(sp.MassKg),
		MuInitialB: units.Tesla(sp.MuInitialB()),
	}
	if s.HFrom == "" {
		s.HFrom = HFromCurrent
	}
	if s.Class == "" {
		s.Class = ClassSoft
	}
	g, err := SpecimenGeometry(sp)
	if err != nil {
		return Setup{}, nil, err
	}
	switch sp.Shape {
	case "strip":
		s.DemagFactor = sp.Strip.DemagFactor
	case "direct":
		s.DemagFactor = sp.Direct.DemagFactor
	}
	spec := fmt.Sprintf("specimen %s", sp.ID)
	s.PathLength, s.Area = g.PathLength, g.Area
	s.RelUPath, s.RelUArea = g.RelUPath, g.RelUArea
	s.Geometry = g.Method
	if s.CoilArea > 0 && s.CoilArea < s.Area {
		return Setup{}, nil, fmt.Errorf("fixture %s: winding.coil_area_mm2: %g mm² is smaller than the specimen's area %.4g mm²",
			fx.Name, fx.Winding.CoilAreaMM2, float64(s.Area)/(mm*mm))
	}
	if err := s.Validate(); err != nil {
		return Setup{}, nil, fmt.Errorf("fixture %s, %s: %w", fx.Name, spec, err)
	}
	return s, g.Warnings, nil
}

// SetAccuracy copies the reading accuracy of an instrument of a role into
// the budget: a supply's current reading, an integrator's flux reading, a
// field meter's field reading. Other roles change nothing.
func (s *Setup) SetAccuracy(role string, a Accuracy) {
	switch role {
	case instr.RoleSupply:
		s.Current = a
	case instr.RoleIntegrator:
		s.Flux = a
	case instr.RoleFieldMeter:
		s.Field = a
	}
}

// FluxSpan returns the flux-linkage span N2·A·2·Bmax (Wb-turns) that a loop
// of tip flux density bmax sweeps through the integrator; its range must
// hold it (REFERENCE §5, after ASTM A977).
func (s Setup) FluxSpan(bmax units.Tesla) units.WeberTurn {
	return units.WeberTurn(float64(s.N2) * float64(s.Area) * 2 * float64(bmax))
}

// SpecimenGeometry returns the magnetic path length, area and method of a
// specimen from its shape block (SpecimenTol for the budget), with
// the geometry's warnings (a strip length outside what IEC 60404-2 assumes,
// a ring wider than IEC 60404-4 admits). It needs no fixture, so
// `hystd check` can warn about a specimen file on its own.
func SpecimenGeometry(sp config.Specimen) (geometry.Result, error) {
	spec := fmt.Sprintf("specimen %s", sp.ID)
	var g geometry.Result
	var err error
	tol := SpecimenTol(sp)
	switch sp.Shape {
	case "ring":
		r := sp.Ring
		if r == nil {
			return geometry.Result{}, fmt.Errorf("%s: ring: shape is ring but the ring block is missing", spec)
		}
		g, err = geometry.Ring(units.Metre(r.OuterMM*mm), units.Metre(r.InnerMM*mm), units.Metre(r.HeightMM*mm),
			r.StackingFactor, r.Path, tol)
	case "epstein":
		e := sp.Epstein
		if e == nil {
			return geometry.Result{}, fmt.Errorf("%s: epstein: shape is epstein but the epstein block is missing", spec)
		}
		g, err = geometry.Epstein(units.Kilogram(sp.MassKg), units.Metre(e.StripLengthM),
			units.KilogramPerCubicMetre(sp.DensityKgM3), e.Strips, tol)
	case "strip":
		st := sp.Strip
		if st == nil {
			return geometry.Result{}, fmt.Errorf("%s: strip: shape is strip but the strip block is missing", spec)
		}
		g, err = geometry.Strip(units.Kilogram(sp.MassKg), units.Metre(st.LengthM),
			units.KilogramPerCubicMetre(sp.DensityKgM3), units.Metre(st.PathLengthM), tol)
	case "direct":
		d := sp.Direct
		if d == nil {
			return geometry.Result{}, fmt.Errorf("%s: direct: shape is direct but the direct block is missing", spec)
		}
		g, err = geometry.Direct(units.Metre(d.PathLengthMM*mm), units.SquareMetre(d.AreaMM2*mm*mm), 0, 0)
		if err == nil {
			g.Warnings = append(g.Warnings, "direct geometry: no tolerance given, path length and area are not in the budget")
		}
	default:
		return geometry.Result{}, fmt.Errorf("%s: shape: %q: want ring, epstein, strip or direct", spec, sp.Shape)
	}
	if err != nil {
		return geometry.Result{}, fmt.Errorf("%s: %w", spec, err) // geometry errors begin with the shape block
	}
	return g, nil
}

// SpecimenTol returns the standard uncertainties of a specimen's inputs from
// its tolerances block (defaults: config.DefaultLengthTolMM,
// DefaultMassTolG, DefaultDensityTolPct, common practice): length and mass
// half-widths as rectangular distributions (u = a/√3, GUM 4.3.7), the
// density's relative standard uncertainty as given.
func SpecimenTol(sp config.Specimen) geometry.Tol {
	l, m, d := sp.Tolerances.Tol()
	return geometry.Tol{
		Length:  units.Metre(l * mm / math.Sqrt(3)),
		Mass:    units.Kilogram(m * 1e-3 / math.Sqrt(3)),
		Density: d / 100,
	}
}
