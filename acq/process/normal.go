package process

import (
	"fmt"

	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/calib/units"
)

// NormalCurve builds the normal curve of a family of loops of rising
// amplitude from each loop's Hmax and Bmax figures (as Loop returns them)
// and reports μ_max along it. The points are the tips in ascending H, with
// J = B − μ0·H and Branch 0; store them as a loop of kind "normal-curve".
// A loop without Hmax or Bmax is an error naming its position.
func NormalCurve(loops [][]record.Figure) ([]record.Point, record.Figure, error) {
	var tips []loop.NormalPoint
	for i, fs := range loops {
		var p loop.NormalPoint
		var hasH, hasB bool
		for _, f := range fs {
			switch f.Name {
			case loop.FigHmax:
				p.H, p.UH, hasH = f.Value, f.U, true
			case loop.FigBmax:
				p.B, p.UB, hasB = f.Value, f.U, true
			}
		}
		if !hasH || !hasB {
			return nil, record.Figure{}, fmt.Errorf("normal curve: loop %d of the family has no Hmax or Bmax", i+1)
		}
		tips = append(tips, p)
	}
	c, f, err := loop.NormalCurve(tips)
	if err != nil {
		return nil, record.Figure{}, err
	}
	pts := make([]record.Point, len(c))
	for i, p := range c {
		pts[i] = record.Point{H: p.H, B: p.B, J: p.B - units.Mu0*p.H}
	}
	return pts, record.Figure{Name: f.Name, Value: f.Value, U: f.U, Unit: f.Unit,
		Note: f.Note + "; " + f.Budget.Summary(f.Unit)}, nil
}
