package loop

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"hystd/calib/units"
)

// NormalPoint is the tip of one loop of a family: Hmax and Bmax with their
// expanded uncertainties (k = 2). The tips of loops of rising amplitude
// trace the normal (commutation) curve.
type NormalPoint struct {
	H, B   float64 // A/m, T
	UH, UB float64 // expanded, k = 2; 0 when unknown
}

// ErrShortFamily is returned for a family of fewer than two loops.
var ErrShortFamily = errors.New("normal curve: need the tips of at least two loops")

// NormalCurve sorts the tips of a family of loops by H and returns them
// with μ_max, the largest relative permeability B/(μ0·H) along the curve.
// Between tips μ_max is interpolated: a parabola in ln H through the largest
// value and its two neighbours gives the vertex. Figure.Note says at which H
// it lies; when the largest value is at an end of the family the vertex
// cannot be bracketed and the end value is returned with a note.
func NormalCurve(pts []NormalPoint) ([]NormalPoint, Figure, error) {
	c, f, _, err := normalCurve(pts)
	return c, f, err
}

func normalCurve(pts []NormalPoint) ([]NormalPoint, Figure, Figure, error) {
	var c []NormalPoint
	for i, p := range pts {
		if !(p.H > 0) || math.IsNaN(p.B) || math.IsInf(p.B, 0) || math.IsInf(p.H, 0) {
			return nil, Figure{}, Figure{}, fmt.Errorf("normal curve: tip %d: H %g A/m, B %g T: want H > 0 and a finite B", i, p.H, p.B)
		}
		c = append(c, p)
	}
	if len(c) < 2 {
		return nil, Figure{}, Figure{}, ErrShortFamily
	}
	sort.Slice(c, func(i, j int) bool { return c[i].H < c[j].H })
	mu := func(p NormalPoint) float64 { return p.B / (units.Mu0 * p.H) }
	k := 0
	for i := range c {
		if mu(c[i]) > mu(c[k]) {
			k = i
		}
	}
	f := Figure{Name: FigMuMax, Unit: Units[FigMuMax], Value: mu(c[k])}
	atH := c[k].H
	p := c[k]
	fh := Figure{Name: FigHMuMax, Unit: Units[FigHMuMax]}
	fh.Budget.Add("tip H", p.UH/2, "from the tip's expanded uncertainty, k = 2 → standard")
	// Relative uncertainty of B/(μ0·H) at the tip (uncorrelated H and B).
	f.Budget.Add("tip H and B", mu(p)*math.Hypot(p.UB/2/p.B, p.UH/2/p.H), "from the tips' expanded uncertainties, k = 2 → standard")
	if k > 0 && k < len(c)-1 {
		x0, x1, x2 := math.Log(c[k-1].H), math.Log(c[k].H), math.Log(c[k+1].H)
		y0, y1, y2 := mu(c[k-1]), mu(c[k]), mu(c[k+1])
		// Vertex of the parabola through three points.
		d := (x0 - x1) * (x0 - x2) * (x1 - x2)
		a := (x2*(y1-y0) + x1*(y0-y2) + x0*(y2-y1)) / d
		b := (x2*x2*(y0-y1) + x1*x1*(y2-y0) + x0*x0*(y1-y2)) / d
		if a < 0 {
			xv := -b / (2 * a)
			if xv > x0 && xv < x2 {
				cc := y1 - a*x1*x1 - b*x1
				v := a*xv*xv + b*xv + cc
				f.Budget.Add("interpolation", math.Abs(v-f.Value)/math.Sqrt(3), "Type B: vertex minus largest tip, rectangular")
				f.Value, atH = v, math.Exp(xv)
				fh.Budget.Add("interpolation", math.Abs(atH-c[k].H)/math.Sqrt(3), "Type B: vertex minus largest tip, rectangular")
			}
		}
		f.Note = fmt.Sprintf("parabola in ln H through the largest B/(μ0·H) of %d tips and its neighbours; at H = %.4g A/m", len(c), atH)
	} else {
		f.Note = fmt.Sprintf("largest B/(μ0·H) at an end of the %d tips (H = %.4g A/m): the maximum may lie outside the family", len(c), atH)
	}
	f.U = f.Budget.Expanded()
	fh.Value, fh.U, fh.Note = atH, fh.Budget.Expanded(), "H at μ_max: "+f.Note
	return c, f, fh, nil
}

// BAtName is the figure name of B on the normal curve at field h (A/m):
// "b_at_800_a_m" for 800 A/m.
func BAtName(h float64) string {
	return "b_at_" + strings.ReplaceAll(strconv.FormatFloat(h, 'f', -1, 64), ".", "p") + "_a_m"
}

// BAtReach is how far beyond the family's end tips (relative to the end
// tip's H) B at a field is still read, by extending the end segment: the
// tips' Hmax fall a little short of the commanded amplitudes.
const BAtReach = 0.02

// NormalFigures returns the figures of a family's normal curve: μ_max, the
// H at which it lies (FigHMuMax), and B on the curve at each field of bAt
// (A/m; figure BAtName(h)). B at h is read on the curve through the tips
// (see bAtCurve): the trade quotes B at a field as the peak B of a loop of
// that peak H, which is the normal curve, not a branch of one loop. Its
// budget holds the tips' B and H uncertainties and the interpolation's
// next-order term. A field outside the tips (beyond BAtReach) is an error
// naming it: the family does not reach it.
func NormalFigures(pts []NormalPoint, bAt []float64) ([]NormalPoint, []Figure, error) {
	c, mu, hmu, err := normalCurve(pts)
	if err != nil {
		return nil, nil, err
	}
	figs := []Figure{mu, hmu}
	for _, h := range bAt {
		f, err := bAtCurve(c, h)
		if err != nil {
			return nil, nil, err
		}
		figs = append(figs, f)
	}
	return c, figs, nil
}

// bAtCurve reads B at h on the sorted tips c: Lagrange interpolation in
// ln H–ln B through the four tips nearest h (a cubic; fewer when the family
// is shorter). Its model error, used whole as a standard uncertainty, is
// the next-order term: the largest difference from the interpolations
// through one tip fewer, for ln B and for B on ln H.
func bAtCurve(c []NormalPoint, h float64) (Figure, error) {
	f := Figure{Name: BAtName(h), Unit: "T"}
	n := len(c)
	if !(h > 0) || h < c[0].H*(1-BAtReach) || h > c[n-1].H*(1+BAtReach) {
		return Figure{}, fmt.Errorf("normal curve: B at %g A/m: outside the tips of the family (%.6g to %.6g A/m)", h, c[0].H, c[n-1].H)
	}
	for _, p := range c {
		if !(p.B > 0) {
			return Figure{}, fmt.Errorf("normal curve: B at %g A/m: tip at %.6g A/m has B %.6g T, not above 0", h, p.H, p.B)
		}
		if h == p.H {
			f.Value = p.B
			f.Budget.Add("tip B", p.UB/2, "the tip at this H, expanded uncertainty k = 2 → standard")
			f.Note = "B of the tip at this H"
			f.U = f.Budget.Expanded()
			return f, nil
		}
	}
	// The m tips nearest h in ln H, as a contiguous run.
	m := min(4, n)
	lo := sort.Search(n, func(i int) bool { return c[i].H >= h }) - m/2
	lo = max(0, min(lo, n-m))
	x := math.Log(h)
	// interp interpolates y(B) of the tips ps at ln h and returns it as B
	// (inv), with the Lagrange weights.
	interp := func(ps []NormalPoint, y, inv func(float64) float64) (float64, []float64) {
		w := make([]float64, len(ps))
		var v float64
		for i := range ps {
			l := 1.0
			for j := range ps {
				if j != i {
					l *= (x - math.Log(ps[j].H)) / (math.Log(ps[i].H) - math.Log(ps[j].H))
				}
			}
			w[i] = l
			v += l * y(ps[i].B)
		}
		return inv(v), w
	}
	id := func(b float64) float64 { return b }
	ps := c[lo : lo+m]
	var w []float64
	f.Value, w = interp(ps, math.Log, math.Exp)
	// The next-order term: the larger difference between an interpolation
	// and those through one tip fewer (either end dropped), of ln B and of B
	// on ln H, whichever is larger (on an analytic curve with a sharp knee
	// the ln B estimate alone fell short of its error; TestNormalFigures).
	if m > 2 {
		var d float64
		for _, v := range []struct{ y, inv func(float64) float64 }{{math.Log, math.Exp}, {id, id}} {
			all, _ := interp(ps, v.y, v.inv)
			l, _ := interp(ps[:m-1], v.y, v.inv)
			r, _ := interp(ps[1:], v.y, v.inv)
			d = math.Max(d, math.Max(math.Abs(all-l), math.Abs(all-r)))
		}
		f.Budget.Add("interpolation", d, "next-order term of the interpolation (of ln B and of B on ln H, the larger)")
	}
	// The tips' uncertainties through the weights: δ ln B = Σ w_i·δ ln B_i,
	// and a tip's H error δ ln H_i moves its point along the curve's local
	// slope s_i = d ln B/d ln H, i.e. acts as −s_i·δ ln H_i on ln B_i.
	var ub, uh float64
	for i, p := range ps {
		ub += (w[i] * p.UB / 2 / p.B) * (w[i] * p.UB / 2 / p.B)
		j0, j1 := max(0, i-1), min(len(ps)-1, i+1)
		sl := math.Log(ps[j1].B/ps[j0].B) / math.Log(ps[j1].H/ps[j0].H)
		uh += (w[i] * sl * p.UH / 2 / p.H) * (w[i] * sl * p.UH / 2 / p.H)
	}
	f.Budget.Add("tip B", f.Value*math.Sqrt(ub), "the tips' expanded uncertainties, k = 2 → standard, through the interpolation weights")
	f.Budget.Add("tip H", f.Value*math.Sqrt(uh), "the tips' H uncertainties through the local slope d ln B/d ln H")
	f.U = f.Budget.Expanded()
	f.Note = fmt.Sprintf("on the normal curve: Lagrange interpolation in ln H–ln B through the %d tips from %.6g to %.6g A/m", m, ps[0].H, ps[m-1].H)
	return f, nil
}

// NormalMuInitial returns μ_initial read on the normal curve of a family:
// B/(μ0·H) at the low flux density b (T), with H at b read as bAtCurve reads
// B at a field, on the tips with H and B swapped (the curve rises, so B
// orders the tips as H does). At low induction the normal curve of a
// demagnetized specimen runs close to its initial magnetization curve
// (common practice), so this is the family's μ_initial; the note says it was
// read on the normal curve. A level outside the tips' B is an error naming it.
func NormalMuInitial(pts []NormalPoint, b float64) (Figure, error) {
	c, _, _, err := normalCurve(pts)
	if err != nil {
		return Figure{}, err
	}
	n := len(c)
	if !(b > 0) || b < c[0].B*(1-BAtReach) || b > c[n-1].B*(1+BAtReach) {
		return Figure{}, fmt.Errorf("normal curve: μ_initial at %g T: outside the tips' B (%.6g to %.6g T)", b, c[0].B, c[n-1].B)
	}
	sw := make([]NormalPoint, n)
	for i, p := range c {
		sw[i] = NormalPoint{H: p.B, B: p.H, UH: p.UB, UB: p.UH}
		if i > 0 && !(sw[i].H > sw[i-1].H) {
			return Figure{}, fmt.Errorf("normal curve: μ_initial at %g T: the tips' B does not rise with H (%.6g T at %.6g A/m after %.6g T)", b, p.B, p.H, c[i-1].B)
		}
	}
	g, err := bAtCurve(sw, b)
	if err != nil {
		return Figure{}, fmt.Errorf("normal curve: μ_initial at %g T: %w", b, err)
	}
	h := g.Value
	f := Figure{Name: FigMuInitial, Unit: Units[FigMuInitial], Value: b / (units.Mu0 * h)}
	// Read with H and B swapped, the terms named after B are the tips' H
	// and the other way round.
	swap := map[string]string{"tip B": "tip H", "tip H": "tip B"}
	for _, k := range g.Budget.Components {
		name := k.Name
		if s, ok := swap[name]; ok {
			name = s
		}
		f.Budget.Add(name, f.Value*k.U/h, "through H at the level")
	}
	f.U = f.Budget.Expanded()
	f.Note = fmt.Sprintf("B/(μ0·H) on the normal curve at B = %g T, H = %.6g A/m (%s)", b, h, strings.Replace(g.Note, "on the normal curve: ", "", 1))
	return f, nil
}
