package loop

import (
	"errors"
	"fmt"
	"math"
	"sort"

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
	var c []NormalPoint
	for i, p := range pts {
		if !(p.H > 0) || math.IsNaN(p.B) || math.IsInf(p.B, 0) || math.IsInf(p.H, 0) {
			return nil, Figure{}, fmt.Errorf("normal curve: tip %d: H %g A/m, B %g T: want H > 0 and a finite B", i, p.H, p.B)
		}
		c = append(c, p)
	}
	if len(c) < 2 {
		return nil, Figure{}, ErrShortFamily
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
			}
		}
		f.Note = fmt.Sprintf("parabola in ln H through the largest B/(μ0·H) of %d tips and its neighbours; at H = %.4g A/m", len(c), atH)
	} else {
		f.Note = fmt.Sprintf("largest B/(μ0·H) at an end of the %d tips (H = %.4g A/m): the maximum may lie outside the family", len(c), atH)
	}
	f.U = f.Budget.Expanded()
	return c, f, nil
}
