package recipe

import "hystd/configs"

// Warnings returns what is allowed in the recipe but probably wrong, each
// located at its key as FILE:LINE: key: warning: problem.
//
// A demag_curve (and its recoil loops) measures only changes of flux from its
// start at +saturate; its absolute B comes from the top tip of a centred
// symmetric loop recorded earlier in the run (a record_loop, or a
// normal_curve's largest loop) that reaches at least the same field. Without
// one the curve is kept raw only, which the run's events report only after
// the specimen has been measured: a recipe that cannot give the curve a level
// is worth a warning before it runs.
func (r *Recipe) Warnings() configs.Errors {
	var ws configs.Errors
	var top Level // largest amplitude of a recorded symmetric loop so far
	raise := func(l Level) {
		if l.Value > top.Value {
			top = l
		}
	}
	for i, s := range r.Steps {
		switch {
		case s.RecordLoop != nil:
			raise(s.RecordLoop.Amplitude)
		case s.NormalCurve != nil:
			n := s.NormalCurve
			for _, a := range n.Amplitudes {
				raise(a)
			}
			if n.To != nil {
				raise(*n.To)
			}
		case s.DemagCurve != nil:
			sat := s.DemagCurve.Saturate
			if top.Value >= sat.Value && top.Unit == sat.Unit {
				continue
			}
			p := stepPath(i, "demag_curve") + ".saturate"
			if top.Unit == "" {
				ws = append(ws, warning(r.doc, p, "no record_loop before this step saturates the specimen (at least %s): the curve's absolute B has no reference and it will be kept raw only; record a symmetric loop at the saturate amplitude first", sat))
			} else {
				ws = append(ws, warning(r.doc, p, "no record_loop before this step reaches %s (the largest is %s): the specimen may not be saturated and the curve's absolute B has no reference, so it will be kept raw only; record a symmetric loop at the saturate amplitude first", sat, top))
			}
		}
	}
	return ws
}

// warning builds a warning for the key at path of doc, as `hystd check`
// prints it: FILE:LINE: key: warning: problem.
func warning(doc *configs.Doc, path, format string, args ...any) *configs.Error {
	e := doc.Errorf(path, format, args...)
	e.Problem = "warning: " + e.Problem
	return e
}
