package api

import (
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
	runs := map[string]record.Run{}
	loops := map[string][]record.Loop{}
	out := []trendJSON{}
	// Limits of the grade, from the verdicts stored with the points' loops:
	// drawn when no limits are given and all those verdicts agree on them.
	var gradeLim *record.Verdict
	gradeSame := true
	for _, p := range pts {
		run, ok := runs[p.RunID]
		if !ok {
			var err error
			if run, err = s.o.Reader.Run(r.Context(), p.RunID); err != nil {
				s.fail(w, r, err)
				return
			}
			runs[p.RunID] = run
			if loops[p.RunID], err = s.o.Reader.Loops(r.Context(), p.RunID); err != nil {
				s.fail(w, r, err)
				return
			}
		}
		var l *record.Loop
		for i := range loops[p.RunID] {
			if loops[p.RunID][i].N == p.Loop {
				l = &loops[p.RunID][i]
			}
		}
		if l == nil {
			continue
		}
		if (f.kind != "" && l.Kind != f.kind) || (f.recipe != "" && run.Recipe != f.recipe) || (f.fixture != "" && run.Fixture != f.fixture) ||
			(!math.IsNaN(f.amp) && !(math.Abs(l.Amplitude-f.amp) <= f.tol*math.Abs(f.amp))) {
			continue
		}
		amp := num(l.Amplitude)
		tp := trendJSON{RunID: p.RunID, Loop: p.Loop, At: stamp(p.At), Value: num(p.Value), U: num(p.U),
			Kind: l.Kind, Amplitude: &amp, AmpUnit: l.AmpUnit, Recipe: run.Recipe, Fixture: run.Fixture}
		if f.given {
			o, _ := grade.Decide(f.rule, p.Value, p.U, f.lo, f.hi)
			tp.Verdict = string(o)
		} else {
			for _, v := range l.Verdicts {
				if v.Figure == fig {
					tp.Verdict = string(v.Outcome)
					if gradeLim == nil {
						vv := v
						gradeLim = &vv
					} else if !sameNum(gradeLim.Min, v.Min) || !sameNum(gradeLim.Max, v.Max) || gradeLim.Rule != v.Rule || gradeLim.Grade != v.Grade {
						gradeSame = false
					}
				}
			}
		}
		out = append(out, tp)
	}
	resp := map[string]any{"specimen": spec, "figure": fig, "points": out}
	switch {
	case f.given:
		resp["limits"] = map[string]any{"lo": num(f.lo), "hi": num(f.hi), "rule": f.rule, "source": "given"}
	case gradeLim != nil && gradeSame:
		resp["limits"] = map[string]any{"lo": num(gradeLim.Min), "hi": num(gradeLim.Max), "rule": gradeLim.Rule, "source": "grade " + gradeLim.Grade}
	}
	writeJSON(w, http.StatusOK, resp)
}

func sameNum(a, b float64) bool { return a == b || (math.IsNaN(a) && math.IsNaN(b)) }
