package process

import (
	"fmt"
	"strings"

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

// Family gathers the loops of one normal_curve step as a run processes them
// and, with the last, returns the figures of the step's normal curve:
// μ_max, H at μ_max and B at each b_at field (loop.NormalFigures), to be
// stored with that last loop. Each loop's own Hmax, Bmax and μa are the rows
// of the tip table. The zero value is ready; it is not safe for concurrent
// use (a run processes its loops in order).
type Family struct {
	key   string
	loops [][]record.Figure
}

// Add takes the figures of loop member (1-based) of of the normal_curve
// step key. Before the last it returns nil. With the last it returns the
// curve's figures, and μ_initial at muB (T; the specimen's mu_initial_b_mt)
// read on the curve (loop.NormalMuInitial); a b_at field or a μ_initial
// level the tips do not reach is left out and named in the μ_max figure's
// note. A family with fewer than two loops with tips gives no figures and
// no error.
func (f *Family) Add(key string, member, of int, bAt []float64, muB units.Tesla, figs []record.Figure) ([]record.Figure, error) {
	if key != f.key || member == 1 {
		f.key, f.loops = key, nil
	}
	f.loops = append(f.loops, figs)
	if member < of {
		return nil, nil
	}
	loops := f.loops
	f.key, f.loops = "", nil
	var tips []loop.NormalPoint
	for _, fs := range loops {
		var p loop.NormalPoint
		var hasH, hasB bool
		for _, g := range fs {
			switch g.Name {
			case loop.FigHmax:
				p.H, p.UH, hasH = g.Value, g.U, true
			case loop.FigBmax:
				p.B, p.UB, hasB = g.Value, g.U, true
			}
		}
		if hasH && hasB {
			tips = append(tips, p)
		}
	}
	if len(tips) < 2 {
		return nil, nil
	}
	c, _, err := loop.NormalCurve(tips)
	if err != nil {
		return nil, fmt.Errorf("normal curve of %s: %w", key, err)
	}
	var reach []float64
	var missed []string
	for _, h := range bAt {
		if h >= c[0].H*(1-loop.BAtReach) && h <= c[len(c)-1].H*(1+loop.BAtReach) {
			reach = append(reach, h)
		} else {
			missed = append(missed, fmt.Sprintf("%g A/m", h))
		}
	}
	_, lf, err := loop.NormalFigures(tips, reach)
	if err != nil {
		return nil, fmt.Errorf("normal curve of %s: %w", key, err)
	}
	if muB > 0 {
		if g, err := loop.NormalMuInitial(tips, float64(muB)); err == nil {
			lf = append(lf, g)
		} else {
			missed = append(missed, fmt.Sprintf("μ_initial at %g T", float64(muB)))
		}
	}
	out := make([]record.Figure, len(lf))
	for i, g := range lf {
		note := g.Note + "; " + g.Budget.Summary(g.Unit)
		if i == 0 {
			note = fmt.Sprintf("normal curve of %d loops (%s); ", len(tips), key) + note
			if len(missed) > 0 {
				note += "; not read (beyond the tips): " + strings.Join(missed, ", ")
			}
		}
		out[i] = record.Figure{Name: g.Name, Value: g.Value, U: g.U, Unit: g.Unit, Note: note}
	}
	return out, nil
}
