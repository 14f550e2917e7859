// Package loop finds the branches of a recorded B–H loop and computes the
// figures that magnetic test standards report, each with an uncertainty
// budget. Pure numerics on float64 slices in SI units (s, A/m, T).
//
// Branches are found on H alone with a reversal threshold, so noise, a
// partial first cycle, several cycles and uneven sampling are handled.
// Figures are read on the samples themselves (interpolation between
// bracketing samples, or a local fit where the data show noise), never on
// bins, so the same samples in any unit system give the same figures. Every
// figure is declared once, in the table of defs.go.
//
// # Branches and figures (calib/loop)
//
//   - A reversal of H is declared when H moves back from its running extremum by 10 % of its range, so
//     noise does not split branches. A branch is complete when it runs from within 5 % of one tip to within
//     5 % of the other; a first piece starting near H = 0 is the initial curve. Partial pieces are labelled
//     but not used for loop figures. Time stamps may be uneven.
//   - Every figure is read on the samples; nothing depends on bins, so the same samples in SI and CGS give
//     the same figures to 1e-9 (`calib/loopcsv` TestUnitInvariance over every analyze input).
//   - Smooth or noisy is decided locally (`calib/loop/smooth.go`): the noise variance is estimated from each
//     sample's residual from the parabola through three neighbours (third order, so curvature is not taken
//     for noise; values within 1e-11 of round-off count as smooth). A local least-squares parabola in time is
//     used only where its residual variance over its window is explained by that noise (within
//     1·√(2/(n−3)) of it); the widest such window is used (two rejections in a row end the search), so the
//     window is never wider than the curvature allows. Otherwise the samples are interpolated.
//   - Crossings (Br at H = 0, HcB at B = 0, HcJ at J = 0, Hk at J = 0.9·Jr): around the median sign change
//     (window ±min(250, max(24, n/20)) samples), the time of the crossing comes from the two bracketing
//     samples or, with noise, the local parabola of the crossing quantity; the read quantity is taken there
//     the same way. On smooth data the cubics through the four samples around the crossing refine the
//     straight line (not across a jump, clamped to the bracket where the four are monotone).
//   - Tips: the apex of the sweep H(t) — two straight lines, through the two samples nearest the tip on each
//     side (smooth data: exact for a triangular sweep even when no sample falls on the apex) or
//     least-squares over a window that the noise and a quadratic-term test allow (noisy). B is read on both
//     lines at the apex and averaged. A rounded tip (sinusoidal sweep, lagging current) is the vertex of a
//     parabola of H(t) instead: on smooth data when the parabola through the four nearest samples predicts
//     the extreme sample better than the lines (left out; the winner's miss enters U), kept between the
//     extreme sample and the lines' apex; with noise when a parabola over the widest window without a quartic
//     term bends significantly and fits as well as two lines (F test). A tip within 8 samples of the
//     record's start or end is read from the one side, at the record's end. A tip with no apex (held flat,
//     or a staircase's top step) is the mean of the extreme sample and the sides' flat windows at its level:
//     not a side that climbs to it, nor a flat one a step below (a staircase sampled in clusters of a few
//     readings, steps left out; TestTipsOfClusteredStaircase). Tip samples belong to the sweep;
//     no band average. `readTip` and its stages are in tips.go; tests on Hm·cos ωt in roundtip_test.go.
//   - (BH)max, operating point: on each complete falling branch, the exact maximum of −H·B along the straight
//     pieces between samples, refined on smooth data by the cubics of H(t) and B(t) through four samples
//     (golden section on three pieces), or with noise the vertex of a local parabola of the product; mean over
//     the falling branches. μ_rec: least-squares slope of the samples with −Hk/2 ≤ H ≤ 0 (exact on a
//     straight line), or of the recoil pieces when recorded. A curve that never reaches B = 0 has no HcB.
//   - Hmax and Bmax: half the difference of the mean top and bottom tips. μa = Bmax/(μ0·Hmax). Loss
//     W = ∮H dB per full cycle on the samples (trapezoid, closed), J/kg = W/ρ. μ_initial = B/(μ0·H) where the
//     initial curve reaches `MuInitialB` (default 4 mT). Negative-branch values are magnitudes averaged over
//     all complete branches; magnet figures come from the falling branch in the 2nd quadrant.
//   - Normal curve: tips of a family of loops; μ_max is the vertex of a parabola in ln H through the
//     largest B/(μ0·H) and its neighbours (`process.NormalCurve`).
//
// # Uncertainty
//
// For each figure (GUM, uncorrelated components, U = 2·u_c):
//   - noise: for the readings with their own fit (Br, HcB, HcJ, Hk, (BH)max, Hmax, Bmax, μa, squareness) the
//     standard error of the local fit at the reading, propagated through the crossing time, plus the model
//     error a cubic term left in the fit's residuals would cause there; with interpolation, the noise near
//     the reading times the interpolation weights (for (BH)max the product's scatter there); the tips'
//     lines carry the bias their quadratic term would leave at the tip (c·L²/6). Other figures (loss, μ_rec, the operating
//     point's B and H): the scatter over 16 interleaved subsets of samples, s/√16 (15 degrees of freedom; with
//     4 subsets k = 2 covered only ~86 %);
//   - estimator: the change when every other sample is left out, as a rectangular half-width;
//   - tip scatter for Hmax, Bmax and μa; and every `Source`: path length and area from the geometry
//     tolerances, current, integrator and field-meter gain and offset from the profiles' `accuracy` (k = 2 →
//     standard), and the drift-rate and closure uncertainty. Sources are applied as perturbations of the
//     corrected H and B and the figures re-evaluated (the loss from three moments of the samples, as it is
//     linear in each perturbation).
//
// Coverage is tested twice. `calib/loop` TestCoverage: 40 noisy tanh loops, exact values covered in 37–40
// of 40 per figure (Hmax 40, Bmax 40, Br 38, HcB 40, HcJ 40, μa 40, loss 38, (BH)max 40; asserted ≥ 33, the
// binomial bound for 95 %). `acq/process` TestCoverageOnTheBench (skipped with -short, ~3 s): 40 loops of the
// bench's Jiles–Atherton specimen through `process.Loop` with the integrator model's noise and drift and
// current noise, against the same specimen recorded without noise at 0.25 A/m: Hmax 40, Bmax 39, Br 40,
// HcB 40, HcJ 40, μa 39, loss 38 of 40 (asserted ≥ 38 each). The loss depends on the closure ε (a tilt of B
// moves W by −Hmax·ε), so the tips' B must carry their noise even where no line window passes (then the
// sample's own noise is the floor).
// Every reported value is rounded to its U (two significant digits of U, GUM 7.2.6) by one rule per
// language: `calib/units.Rounded` (analyze, run, demo, import, verdicts, the PDF report) and `roundU` in the
// page's app.js (checked against the Go rule by `TestBrowserMagnetQuadrant`); the store and JSON keep full
// precision.
//
// # Checks against outside values
//
// REFERENCE §10 items 1–13 are tests in `calib/units`, `calib/geometry`, `calib/correct`, `calib/loop`;
// items 12, 14 (Jiles–Atherton set, values [calc]) and 15 (Stoner–Wohlfarth random ensemble, values from
// memory) run through `process.Loop` on the simulated bench's models in `acq/process/models_test.go`.
// Analytic loops (tanh, parallelogram, straight-line magnet) with noise, uneven sampling, a partial first
// branch, several cycles and an integrator drift ramp are recovered within tolerances derived in the
// tests' comments.
package loop
