package physics

import (
	"fmt"
	"math"
)

// Geometry is how a fixture turns winding current into the field in the
// specimen and how much area the flux crosses.
type Geometry struct {
	Shape   string       `yaml:"shape"` // ring | epstein | yoke
	Ring    *RingGeom    `yaml:"ring"`
	Epstein *EpsteinGeom `yaml:"epstein"`
	Yoke    *YokeGeom    `yaml:"yoke"`
}

// RingGeom is a ring (toroid) specimen.
type RingGeom struct {
	OuterDiameterMM float64 `yaml:"outer_diameter_mm"`
	InnerDiameterMM float64 `yaml:"inner_diameter_mm"`
	HeightMM        float64 `yaml:"height_mm"`
	// Path is "mean" (π·(D+d)/2, IEC 60404-4) or "effective" (l_e of IEC 60205).
	Path string `yaml:"path"`
	// StackingFactor scales the cross-section of a laminated ring (default 1).
	StackingFactor float64 `yaml:"stacking_factor"`
}

// EpsteinGeom is an Epstein square of strips (IEC 60404-2).
type EpsteinGeom struct {
	MassKG        float64 `yaml:"mass_kg"`
	StripLengthMM float64 `yaml:"strip_length_mm"`
	DensityKGM3   float64 `yaml:"density_kg_m3"`
	PathLengthMM  float64 `yaml:"path_length_mm"` // default 940 (conventional l_m)
}

// YokeGeom is a specimen clamped between the pole pieces of an electromagnet.
// H in the specimen is Efficiency·N1·I/GapMM: the fraction of the winding's
// ampere-turns that drops across the specimen (the rest drops in the iron).
type YokeGeom struct {
	GapMM      float64 `yaml:"gap_mm"` // specimen length between the pole faces
	AreaMM2    float64 `yaml:"area_mm2"`
	Efficiency float64 `yaml:"efficiency"` // default 1
}

// Resolve returns the magnetic path length l_m (m) and the cross-section A
// (m²), or an error naming the first bad value.
func (g Geometry) Resolve() (lm, area float64, err error) {
	switch g.Shape {
	case "ring":
		r := g.Ring
		if r == nil {
			return 0, 0, fmt.Errorf("ring: missing for shape ring")
		}
		if !(r.InnerDiameterMM > 0 && r.OuterDiameterMM > r.InnerDiameterMM && r.HeightMM > 0) {
			return 0, 0, fmt.Errorf("ring: need 0 < inner_diameter_mm < outer_diameter_mm and height_mm > 0")
		}
		sf := r.StackingFactor
		if sf == 0 {
			sf = 1
		}
		if !(sf > 0 && sf <= 1) {
			return 0, 0, fmt.Errorf("ring.stacking_factor: must be within (0, 1], got %g", sf)
		}
		r1, r2, h := r.InnerDiameterMM/2e3, r.OuterDiameterMM/2e3, r.HeightMM/1e3
		switch r.Path {
		case "", "mean":
			lm = math.Pi * (r1 + r2)
			area = (r2 - r1) * h
		case "effective":
			// IEC 60205 closed form for a ring of rectangular section.
			ln := math.Log(r2 / r1)
			lm = 2 * math.Pi * ln / (1/r1 - 1/r2)
			area = h * ln * ln / (1/r1 - 1/r2)
		default:
			return 0, 0, fmt.Errorf("ring.path: must be mean or effective, got %q", r.Path)
		}
		return lm, area * sf, nil
	case "epstein":
		e := g.Epstein
		if e == nil {
			return 0, 0, fmt.Errorf("epstein: missing for shape epstein")
		}
		if !(e.MassKG > 0 && e.StripLengthMM > 0 && e.DensityKGM3 > 0) {
			return 0, 0, fmt.Errorf("epstein: mass_kg, strip_length_mm and density_kg_m3 must be > 0")
		}
		lm = 0.94
		if e.PathLengthMM != 0 {
			if !(e.PathLengthMM > 0) {
				return 0, 0, fmt.Errorf("epstein.path_length_mm: must be > 0")
			}
			lm = e.PathLengthMM / 1e3
		}
		// IEC 60404-2: A = m / (4·l·ρ).
		return lm, e.MassKG / (4 * e.StripLengthMM / 1e3 * e.DensityKGM3), nil
	case "yoke":
		y := g.Yoke
		if y == nil {
			return 0, 0, fmt.Errorf("yoke: missing for shape yoke")
		}
		if !(y.GapMM > 0 && y.AreaMM2 > 0) {
			return 0, 0, fmt.Errorf("yoke: gap_mm and area_mm2 must be > 0")
		}
		eff := y.Efficiency
		if eff == 0 {
			eff = 1
		}
		if !(eff > 0 && eff <= 1) {
			return 0, 0, fmt.Errorf("yoke.efficiency: must be within (0, 1], got %g", eff)
		}
		return y.GapMM / 1e3 / eff, y.AreaMM2 / 1e6, nil
	default:
		return 0, 0, fmt.Errorf("shape: must be ring, epstein or yoke, got %q", g.Shape)
	}
}
