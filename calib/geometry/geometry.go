// Package geometry turns a specimen's dimensions into the magnetic path
// length l_m and the cross-section A that convert current to H (H = N1·I/l_m)
// and flux linkage to B (B = ψ/(N2·A)). Pure numerics: lengths in m, areas in
// m², masses in kg, densities in kg/m³.
//
// Each constructor also propagates the standard uncertainties of its inputs
// (Tol) to relative standard uncertainties of l_m and A, for the budget.
package geometry

import (
	"errors"
	"fmt"
	"math"

	"hystd/calib/units"
)

// EpsteinPathLength is the conventional magnetic path length of the Epstein
// frame, 0.94 m (IEC 60404-2).
const EpsteinPathLength units.Metre = 0.94

// RingRatioLimit is the largest outer/inner diameter ratio IEC 60404-4 admits
// for a ring specimen; above it H varies too much across the ring wall.
const RingRatioLimit = 1.4

// Result is the geometry of one specimen.
type Result struct {
	PathLength units.Metre       // magnetic path length l_m
	Area       units.SquareMetre // specimen cross-section A (metal only)
	Volume     float64           // m³, l_m·A
	Method     string            // how l_m and A were obtained, for the record
	// RelUPath and RelUArea are the relative standard uncertainties of
	// PathLength and Area propagated from Tol.
	RelUPath, RelUArea float64
	Warnings           []string
}

// Tol holds the standard uncertainties of the inputs. The zero value means
// exact inputs; DefaultTol holds common-practice values.
type Tol struct {
	Length  units.Metre    // of every length measured (diameters, height, strip length)
	Mass    units.Kilogram // of a weighed mass
	Density float64        // relative, of a density taken from a material table
}

// DefaultTol is common practice [trade]: a caliper read to ±0.02 mm and a
// balance to ±0.01 g, both taken as rectangular (u = a/√3), and a tabulated
// density known to 0.5 % (standard).
var DefaultTol = Tol{Length: units.Metre(0.02e-3 / math.Sqrt(3)), Mass: units.Kilogram(0.01e-3 / math.Sqrt(3)), Density: 0.005}

// Effective holds the IEC 60205 core constants and effective parameters.
type Effective struct {
	C1     float64 // Σ l/A, 1/m
	C2     float64 // Σ l/A², 1/m³
	Le     units.Metre
	Ae     units.SquareMetre
	Ve     float64 // m³
	Method string
}

// RingEffective returns the IEC 60205 effective parameters of a ring of
// inner radius r1, outer radius r2 and (metal) height h, in closed form
// (the sums Σ l/A and Σ l/A² taken as integrals over the radius):
// C1 = 2π/(h·ln(r2/r1)),
// C2 = 2π·(1/r1 − 1/r2)/(h²·ln³(r2/r1)), l_e = C1²/C2, A_e = C1/C2, V_e = C1³/C2².
func RingEffective(r1, r2, h units.Metre) (Effective, error) {
	if !(r1 > 0 && r2 > r1 && h > 0) || math.IsInf(float64(r2), 0) || math.IsInf(float64(h), 0) {
		return Effective{}, fmt.Errorf("ring: need 0 < inner radius < outer radius and height > 0 (got r1 %v, r2 %v, h %v)", r1, r2, h)
	}
	ln := math.Log(float64(r2 / r1))
	c1 := 2 * math.Pi / (float64(h) * ln)
	c2 := 2 * math.Pi * (1/float64(r1) - 1/float64(r2)) / (float64(h) * float64(h) * ln * ln * ln)
	return Effective{
		C1: c1, C2: c2,
		Le: units.Metre(c1 * c1 / c2), Ae: units.SquareMetre(c1 / c2), Ve: c1 * c1 * c1 / (c2 * c2),
		Method: "ring, effective parameters l_e, A_e (IEC 60205)",
	}, nil
}

// PathMean and PathEffective select the ring's path convention.
const (
	PathMean      = "mean"      // l_m = π(D+d)/2, A = h·(D−d)/2 (IEC 60404-4)
	PathEffective = "effective" // l_e, A_e of IEC 60205
)

// Ring returns the geometry of a ring of outer diameter od, inner diameter
// id and height h. stacking is the metal fraction of the height (0 means 1).
// A ratio od/id above RingRatioLimit is accepted with a warning.
func Ring(od, id, h units.Metre, stacking float64, path string, tol Tol) (Result, error) {
	if stacking == 0 {
		stacking = 1
	}
	if !(stacking > 0 && stacking <= 1) {
		return Result{}, fmt.Errorf("ring: stacking factor %g must be in (0, 1]", stacking)
	}
	if !(id > 0 && od > id && h > 0) {
		return Result{}, fmt.Errorf("ring: need 0 < inner diameter < outer diameter and height > 0 (got %v, %v, %v)", id, od, h)
	}
	f := func(od, id, h float64) (l, a float64, err error) {
		switch path {
		case PathMean, "":
			return math.Pi * (od + id) / 2, h * stacking * (od - id) / 2, nil
		case PathEffective:
			e, err := RingEffective(units.Metre(id/2), units.Metre(od/2), units.Metre(h*stacking))
			return float64(e.Le), float64(e.Ae), err
		}
		return 0, 0, fmt.Errorf("ring: path %q: want %q or %q", path, PathMean, PathEffective)
	}
	l, a, err := f(float64(od), float64(id), float64(h))
	if err != nil {
		return Result{}, err
	}
	r := Result{PathLength: units.Metre(l), Area: units.SquareMetre(a), Volume: l * a}
	if path == PathEffective {
		r.Method = "ring, effective parameters l_e, A_e (IEC 60205)"
	} else {
		r.Method = "ring, mean path π(D+d)/2 (IEC 60404-4)"
	}
	if stacking != 1 {
		r.Method += fmt.Sprintf(", stacking factor %g", stacking)
	}
	if ratio := float64(od / id); ratio > RingRatioLimit {
		r.Warnings = append(r.Warnings, fmt.Sprintf("ring: OD/ID = %.3f exceeds %.1f (IEC 60404-4): H varies across the wall, figures are averages", ratio, RingRatioLimit))
	}
	u := float64(tol.Length)
	r.RelUPath, r.RelUArea = propagate(l, a, []float64{float64(od), float64(id), float64(h)}, []float64{u, u, u},
		func(x []float64) (float64, float64) { l, a, _ := f(x[0], x[1], x[2]); return l, a })
	return r, nil
}

// Epstein returns the geometry of an Epstein square: l_m = 0.94 m and
// A = m/(4·l·ρ) for total strip mass m, strip length l and density ρ
// (IEC 60404-2). strips is the number of strips, a multiple of 4 (0: not checked).
func Epstein(mass units.Kilogram, stripLength units.Metre, density units.KilogramPerCubicMetre, strips int, tol Tol) (Result, error) {
	if !(mass > 0 && stripLength > 0 && density > 0) {
		return Result{}, fmt.Errorf("epstein: need mass, strip length and density > 0 (got %v, %v, %v)", mass, stripLength, density)
	}
	if strips < 0 || strips%4 != 0 {
		return Result{}, fmt.Errorf("epstein: %d strips: want a multiple of 4", strips)
	}
	f := func(x []float64) (float64, float64) { return float64(EpsteinPathLength), x[0] / (4 * x[1] * x[2]) }
	x := []float64{float64(mass), float64(stripLength), float64(density)}
	l, a := f(x)
	r := Result{PathLength: units.Metre(l), Area: units.SquareMetre(a), Volume: l * a,
		Method: "Epstein square, l_m = 0.94 m, A = m/(4·l·ρ) (IEC 60404-2)"}
	if sl := float64(stripLength); sl < 0.28 || sl > 0.32 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("epstein: strip length %.3f m is outside 0.28–0.32 m; the 0.94 m path convention assumes that range", sl))
	}
	_, r.RelUArea = propagate(l, a, x, []float64{float64(tol.Mass), float64(tol.Length), tol.Density * x[2]}, f)
	return r, nil
}

// Strip returns the geometry of a strip or rod: A = m/(l·ρ) and l_m =
// pathLength (0: the strip length l).
func Strip(mass units.Kilogram, length units.Metre, density units.KilogramPerCubicMetre, pathLength units.Metre, tol Tol) (Result, error) {
	if !(mass > 0 && length > 0 && density > 0) || pathLength < 0 {
		return Result{}, fmt.Errorf("strip: need mass, length and density > 0 and path length ≥ 0 (got %v, %v, %v, %v)", mass, length, density, pathLength)
	}
	if pathLength == 0 {
		pathLength = length
	}
	x := []float64{float64(mass), float64(length), float64(density), float64(pathLength)}
	f := func(x []float64) (float64, float64) { return x[3], x[0] / (x[1] * x[2]) }
	l, a := f(x)
	r := Result{PathLength: units.Metre(l), Area: units.SquareMetre(a), Volume: l * a,
		Method: "strip, A = m/(l·ρ)"}
	r.RelUPath, r.RelUArea = propagate(l, a, x,
		[]float64{float64(tol.Mass), float64(tol.Length), tol.Density * x[2], float64(tol.Length)}, f)
	return r, nil
}

// Direct returns a geometry given directly as effective path length and
// area; relUPath and relUArea are their relative standard uncertainties.
func Direct(pathLength units.Metre, area units.SquareMetre, relUPath, relUArea float64) (Result, error) {
	if !(pathLength > 0 && area > 0) || math.IsInf(float64(pathLength), 0) || math.IsInf(float64(area), 0) {
		return Result{}, fmt.Errorf("direct: need path length and area > 0 (got %v, %v)", pathLength, area)
	}
	if relUPath < 0 || relUArea < 0 {
		return Result{}, errors.New("direct: uncertainties must be ≥ 0")
	}
	return Result{PathLength: pathLength, Area: area, Volume: float64(pathLength) * float64(area),
		Method: "effective path length and area given directly", RelUPath: relUPath, RelUArea: relUArea}, nil
}

// propagate returns the relative standard uncertainties of l and a from the
// standard uncertainties u of the inputs x, with sensitivities taken by
// central differences (GUM §5.1, uncorrelated inputs).
func propagate(l, a float64, x, u []float64, f func([]float64) (float64, float64)) (relL, relA float64) {
	var sl, sa float64
	y := make([]float64, len(x))
	for i := range x {
		if u[i] == 0 {
			continue
		}
		d := 1e-6 * math.Max(math.Abs(x[i]), u[i])
		copy(y, x)
		y[i] = x[i] + d
		l1, a1 := f(y)
		y[i] = x[i] - d
		l0, a0 := f(y)
		cl, ca := (l1-l0)/(2*d), (a1-a0)/(2*d)
		sl += cl * cl * u[i] * u[i]
		sa += ca * ca * u[i] * u[i]
	}
	return math.Sqrt(sl) / l, math.Sqrt(sa) / a
}
