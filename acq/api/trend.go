package api

import (
	"context"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"strconv"

	"hystd/acq/grade"
	"hystd/acq/record"
)

// trendFilter narrows a trend to like loops and judges its points.
//
//	kind=loop            loop kind
//	amplitude=1000       loop amplitude (in the loop's own unit), within tol
//	tol=0.05             relative tolerance of amplitude (default 0.05)
//	recipe=NAME, fixture=NAME
//	lo=…, hi=…           limits for the figure (SI unit, as stored): each point
//	                     is judged with its U under rule (default guarded-U)
//	rule=guarded-U|simple
//
// Without lo/hi, a point carries the verdict stored with its loop for that
// figure (from the specimen's grade), if any.
type trendFilter struct {
	kind, recipe, fixture string
	amp, tol              float64 // NaN amp: any
	lo, hi                float64 // NaN: none
	rule                  string
	given                 bool // lo or hi given
	judge                 bool // tol given: the caller asks for the filtered, judged form
}

func parseTrendFilter(q url.Values) (trendFilter, error) {
	f := trendFilter{kind: q.Get("kind"), recipe: q.Get("recipe"), fixture: q.Get("fixture"),
		amp: math.NaN(), tol: grade.DefaultTolerance, lo: math.NaN(), hi: math.NaN(), rule: q.Get("rule")}
	for k := range q {
		switch k {
		case "specimen", "figure", "since", "kind", "recipe", "fixture", "amplitude", "tol", "lo", "hi", "rule":
		default:
			return f, fmt.Errorf("unknown query parameter %q (known: specimen, figure, since, kind, amplitude, tol, recipe, fixture, lo, hi, rule)", k)
		}
	}
	for _, p := range []struct {
		key string
		dst *float64
	}{{"amplitude", &f.amp}, {"tol", &f.tol}, {"lo", &f.lo}, {"hi", &f.hi}} {
		if v := q.Get(p.key); v != "" {
			x, err := strconv.ParseFloat(v, 64)
			if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
				return f, fmt.Errorf("%s: %q is not a finite number", p.key, v)
			}
			*p.dst = x
		}
	}
	if !(f.tol >= 0 && f.tol < 1) {
		return f, fmt.Errorf("tol: %g: want a fraction in [0, 1), e.g. 0.05", f.tol)
	}
	if !math.IsNaN(f.lo) && !math.IsNaN(f.hi) && f.lo > f.hi {
		return f, fmt.Errorf("lo %g is above hi %g", f.lo, f.hi)
	}
	switch f.rule {
	case "":
		f.rule = grade.RuleGuarded
	case grade.RuleGuarded, grade.RuleSimple:
	default:
		return f, fmt.Errorf("rule: %q: want %s or %s", f.rule, grade.RuleGuarded, grade.RuleSimple)
	}
	f.given = !math.IsNaN(f.lo) || !math.IsNaN(f.hi)
	f.judge = q.Has("tol") || q.Has("rule")
	return f, nil
}

// active reports whether the filter asks for anything beyond the plain trend.
func (f trendFilter) active() bool {
	return f.kind != "" || f.recipe != "" || f.fixture != "" || !math.IsNaN(f.amp) || f.given || f.judge
}

func (s *server) filteredTrend(w http.ResponseWriter, r *http.Request, spec, fig string, f trendFilter, pts []record.TrendPoint) {
	rl := runLoops{runs: map[string]record.Run{}, loops: map[string][]record.Loop{}}
	out := []trendJSON{}
	// Limits of the grade, from the verdicts stored with the points' loops:
	// drawn when no limits are given and all those verdicts agree on them.
	var lim gradeLimits
	for _, p := range pts {
		run, loops, err := rl.get(r.Context(), s.o.Reader, p.RunID)
		if err != nil {
			s.fail(w, r, err)
			return
		}
		l := loopN(loops, p.Loop)
		if l == nil || !f.keeps(run, l) {
			continue
		}
		amp := num(l.Amplitude)
		tp := trendJSON{RunID: p.RunID, Loop: p.Loop, At: stamp(p.At), Value: num(p.Value), U: num(p.U),
			Kind: l.Kind, Amplitude: &amp, AmpUnit: l.AmpUnit, Recipe: run.Recipe, Fixture: run.Fixture}
		if f.given {
			o, _ := grade.Decide(f.rule, p.Value, p.U, f.lo, f.hi)
			tp.Verdict = string(o)
		} else {
			tp.Verdict = lim.add(l.Verdicts, fig)
		}
		out = append(out, tp)
	}
	resp := map[string]any{"specimen": spec, "figure": fig, "points": out}
	switch {
	case f.given:
		resp["limits"] = map[string]any{"lo": num(f.lo), "hi": num(f.hi), "rule": f.rule, "source": "given"}
	case lim.first != nil && !lim.differ:
		resp["limits"] = map[string]any{"lo": num(lim.first.Min), "hi": num(lim.first.Max), "rule": lim.first.Rule, "source": "grade " + lim.first.Grade}
	}
	writeJSON(w, http.StatusOK, resp)
}

// runLoops reads each run and its loops once.
type runLoops struct {
	runs  map[string]record.Run
	loops map[string][]record.Loop
}

func (c runLoops) get(ctx context.Context, rd record.Reader, id string) (record.Run, []record.Loop, error) {
	if run, ok := c.runs[id]; ok {
		return run, c.loops[id], nil
	}
	run, err := rd.Run(ctx, id)
	if err != nil {
		return record.Run{}, nil, err
	}
	c.runs[id] = run
	if c.loops[id], err = rd.Loops(ctx, id); err != nil {
		return record.Run{}, nil, err
	}
	return run, c.loops[id], nil
}

// loopN returns the (last) loop numbered n, or nil.
func loopN(loops []record.Loop, n int) *record.Loop {
	var l *record.Loop
	for i := range loops {
		if loops[i].N == n {
			l = &loops[i]
		}
	}
	return l
}

// keeps reports whether the filter keeps loop l of run.
func (f trendFilter) keeps(run record.Run, l *record.Loop) bool {
	return (f.kind == "" || l.Kind == f.kind) && (f.recipe == "" || run.Recipe == f.recipe) && (f.fixture == "" || run.Fixture == f.fixture) &&
		(math.IsNaN(f.amp) || math.Abs(l.Amplitude-f.amp) <= f.tol*math.Abs(f.amp))
}

// gradeLimits collects the limits of the stored verdicts of a figure:
// the first seen, and whether any other differs from it.
type gradeLimits struct {
	first  *record.Verdict
	differ bool
}

// add takes the verdicts of figure fig among vs and returns the outcome of
// the last ("" when none).
func (g *gradeLimits) add(vs []record.Verdict, fig string) string {
	outcome := ""
	for _, v := range vs {
		if v.Figure != fig {
			continue
		}
		outcome = string(v.Outcome)
		if g.first == nil {
			vv := v
			g.first = &vv
		} else if !sameNum(g.first.Min, v.Min) || !sameNum(g.first.Max, v.Max) || g.first.Rule != v.Rule || g.first.Grade != v.Grade {
			g.differ = true
		}
	}
	return outcome
}

func sameNum(a, b float64) bool { return a == b || (math.IsNaN(a) && math.IsNaN(b)) }
