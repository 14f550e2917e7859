package loop

import (
	"math"
	"testing"

	"hystd/calib/units"
)

// TestNormalCurve uses the analytic normal curve B(H) = Bs·(1 − exp(−(H/a)²)).
// With x = H/a, μ = (Bs/(μ0·a))·g(x), g(x) = (1 − e^{−x²})/x, and
// g'(x) = 0 ⇔ 2x²·e^{−x²} = 1 − e^{−x²}; the root x* is found below by
// Newton's method (≈ 1.12), so μ_max = Bs·g(x*)/(μ0·a) is derived, not copied.
func TestNormalCurve(t *testing.T) {
	const bs, a = 1.6, 100.0
	g := func(x float64) float64 { return (1 - math.Exp(-x*x)) / x }
	// Newton on q(x) = 2x²e^{−x²} − 1 + e^{−x²}.
	x := 1.0
	for range 50 {
		e := math.Exp(-x * x)
		q := 2*x*x*e - 1 + e
		dq := 4*x*e - 4*x*x*x*e - 2*x*e
		x -= q / dq
	}
	want := bs * g(x) / (units.Mu0 * a)
	var pts []NormalPoint
	for _, h := range []float64{300, 20, 40, 60, 80, 100, 130, 170, 220} { // unsorted on purpose
		pts = append(pts, NormalPoint{H: h, B: bs * (1 - math.Exp(-(h/a)*(h/a))), UH: 0.01 * h, UB: 0.002})
	}
	c, f, err := NormalCurve(pts)
	if err != nil {
		t.Fatal(err)
	}
	if c[0].H != 20 || c[len(c)-1].H != 300 {
		t.Errorf("not sorted: %v", c)
	}
	if e := math.Abs(f.Value-want) / want; e > 2e-3 {
		t.Errorf("μ_max = %.6g, want %.6g (x* = %.5f; rel err %.2g)", f.Value, want, x, e)
	}
	if !(f.U > 0) || f.Name != FigMuMax {
		t.Errorf("figure %+v", f)
	}
	// The largest tip alone is further off than the interpolated vertex.
	best := 0.0
	for _, p := range pts {
		best = math.Max(best, p.B/(units.Mu0*p.H))
	}
	if math.Abs(best-want) < math.Abs(f.Value-want) {
		t.Errorf("interpolation made it worse: tip %g, vertex %g, exact %g", best, f.Value, want)
	}
	if _, _, err := NormalCurve(pts[:1]); err == nil {
		t.Error("one tip accepted")
	}
	if _, _, err := NormalCurve([]NormalPoint{{H: 0, B: 1}, {H: 1, B: 1}}); err == nil {
		t.Error("H = 0 accepted")
	}
}
