// Package grade holds material grades (`kind: grade` files: limits per
// figure and the conditions under which they apply) and judges stored loops
// against them under a named decision rule that uses the expanded
// uncertainty U (k = 2) of each figure.
//
// Decision rules (ILAC-G8:09/2019 and ISO 14253-1:2017 describe guarded
// acceptance; the wording here is ours, the content of those documents is
// from memory). With a guard band w, a lower limit L and an upper limit T:
//
//	pass       when L ≤ value − w and value + w ≤ T   (the whole interval inside the closed limits)
//	fail       when value + w < L or value − w > T     (the whole interval strictly outside)
//	undecided  otherwise                               (the interval touches or straddles a limit)
//
// "guarded-U" takes w = U: a pass is a pass with at least about 97.5 %
// confidence for a normal distribution (k = 2, one-sided); a value whose U
// was not evaluated is undecided. "simple" takes w = 0 and compares the
// value alone (no undecided zone; the risk of a wrong decision near a limit
// is up to 50 %, which the report says beside the verdict).
//
// The package holds the loader of `kind: grade` files (strict,
// `FILE:LINE: key: problem`), Decide(rule, value, U, lo, hi),
// Grade.Judge(loop, rule) and Writer, a record.Writer decorator that sets
// Loop.Verdicts before the store's AddLoop, so verdicts are committed with
// the loop. FormatU rounds for display (GUM 7.2.6); the store keeps full
// precision. TestDecideEdges walks the rule's edges with binary-exact
// values (inside, touching, straddling, outside). The daemon's
// `specimens:` and `grades:` folders form its Registry (acq/daemon), and
// `confirm_mount` makes a run wait for ConfirmMount before any current flows.
package grade
