// Package process is the glue between a recorded loop step and the calib
// numerics: it turns the raw samples of one step into corrected points, the
// figures with their uncertainties and the list of corrections applied. It
// does no I/O. Loop keeps no state and may be called from several goroutines
// at once; Run is the per-run processor the engine calls (through its
// engine.Processor func type): it carries the level of open curves and the
// normal-curve family from loop to loop.
//
// # Processing chain (process.Loop(raw, setup))
//
//  1. Split the step's samples by phase (`splitPhases`). Pre and post holds (field static) give the
//     integrator drift rates by least squares, each with its standard error. Each hold is fitted as
//     ψ = a + r·t + c·H: the c term takes up the flux of a field still settling after a ramp (a closed loop
//     on a yoke overshoots by some kA/m for ~0.2 s), which a straight line in time would read as drift 100
//     times the real one; with H static or moving in step with t it is the plain line ψ = a + r·t
//     (`holdRate`, `driftRates`).
//  2. H from the current (N1·I/l_m) or from the field meter (B_probe/μ0 after its calibration), the current or
//     probe reading first interpolated linearly in time onto the flux reading's time `T` (it was read at `T + DtI`,
//     `T + DtB`) between neighbouring samples of the same setpoint (`alignH`, `alignTo`; `sweep.field`).
//  3. Drift baseline on ψ: the rate is interpolated linearly in time between the pre and post rates and
//     integrated (a straight line when the rates agree). No holds: no baseline, closure only
//     (`drift.baseline`).
//  4. B = ψ/(N2·A); air flux −μ0·H·(A_c − A)/A when the search coil is larger than the specimen
//     (`appendAirFlux`).
//  5. Level of B, by drift mode (`curve.level`): `cyclic-centred` (default, `curve.centre`) removes the
//     closure error ε between the first and last tips of the same kind linearly in time, then centres on
//     (B_top + B_bottom)/2; both compare the tips at the same |H| (the tips' H difference times dB/dH fitted
//     at the tips is taken out first, since a closed loop may leave a tip kA/m short of ±H_m);
//     `demagnetized-start` (`curve.anchor`) sets B = 0 at the first sweep sample (initial curve, μ_initial);
//     `from-level` sets B = `Setup.StartB` there (or what `Setup.StartLevel` gives at its H, `curve.startAt`),
//     with `Setup.UStartB` as a "start level" component of every budget (open demagnetization or recoil curves).
//  6. Demagnetizing correction of open specimens: M = (B/μ0 − H)/(1 − N), H_int = H − N·M (`appendDemag`).
//     Then J (`pointsOf`).
//  7. Figures and budgets (`curve.figures`; the sources of the level stage, then `instrumentSources`, then
//     `Setup.Extra`); every correction is returned with its size (`geometry`, `drift-baseline`,
//     `air-flux`, `closure`, `centering`, `anchor`, `demag`, `missing-samples`, `time-alignment`).
//
// # Normal curve of a run (process.Run, process.Family)
//
// The expansion gives every loop of a `normal_curve` step its step key, its place (`Member` of `Of`) and the
// step's `b_at` fields (A/m) in `LoopInfo` (`recipe.LoopInfo`). The run's processor feeds each such loop's figures to a
// `process.Family`; with the last member it returns `mu_max`, `H_mu_max`, `b_at_<H>_a_m`
// (`loop.NormalFigures`) and `mu_initial` at the specimen's level (`loop.NormalMuInitial`), stored with that loop. A loop that failed is simply absent from the family.
// Tests: `TestNormalFigures` (calib/loop, analytic curve, within U at 4 and 10 tips per decade and
// converging), `TestNormalCurveOnTheBench` (acq/process: 17 noisy Jiles–Atherton loops 200 A/m–8 kA/m
// through `Loop`, against the model's own noise-free tips; measured error/U: μ_max 0.64, H_mu_max 0.20,
// B at 800/2500/5000 A/m 0.02/0.17/0.06, μ at 0.5 T 0.01 — the bench's JA loops below ~400 A/m are not
// cyclic after one conditioning cycle, so its low-B truth is undefined there), `TestNormalMuInitial`
// (calib/loop, analytic curve at 20–200 mT), `TestNormalCurveFigures` (acq/fixture, the wiring).
// `hystd check` warns about a `demag_curve` without a saturating loop before it (`recipe.Warnings`).
//
// # Level of open curves (process.Run, process.TopOf)
//
// An integrator gives only changes of flux, so a curve that starts at saturation and never returns (a
// demagnetization curve, a recoil loop) has no level of its own. hystd sets it the way the trade does with
// a fluxmeter: a symmetric cyclic loop is centred (REFERENCE §5), so its B at +H_sat is absolute, and a
// curve that starts from the same +H_sat in the same saturated state starts at that B.
//   - A magnet recipe records a `record_loop` at the saturating field first, then the `demag_curve` with
//     `saturate` equal to it (`configs/recipes/magnet-demag-curve.yaml`). The recoil loops of a `demag_curve`
//     re-saturate before each one (see the plan listing), so they start from the same tip.
//   - The processor (`process.Run`, built by `fixture.Opened.Processor`) is built per run and sees the loops in order. After each
//     centred loop it keeps `process.TopOf(points)`: a straight line B(H) fitted to the points within 5 % of
//     the H range below the top tip. An open curve is processed in one pass with
//     `from-level` and `Setup.StartLevel`: once H at its first sweep sample is known, the latest kept
//     line whose window holds that H (±1 % of the loop's range) gives the start B, and its standard
//     error at that H its uncertainty; the curve gets a `start-level` correction naming the loop, the
//     field and the fit.
//   - No centred loop before the curve, or none whose tip is at its start field: `process.ErrNoLevel`
//     with the reason; the engine stores the curve raw only and says so in an event (the raw samples can be
//     reprocessed later). The level is right only if that loop saturates the specimen. A saturated
//     specimen is reversible near the tip, so the loop's falling and rising branches coincide there; the
//     `start-level` note gives their difference, and above `process.GapLimit` (2 mT) flags it CHECK. On the
//     simulated disc: 0.3–0.5 mT at ±1.2 MA/m, 19–22 mT at ±300 kA/m (not saturating; its demag curve's
//     Br came out 6–9 mT off the loop's own).
//   - On the simulated yoke (bench-magnet, SW random ensemble, 400 kA/m/s) the demagnetization curve gives
//     Br, HcB, (BH)max and Hk within about 1 % of the bench's truth and within 2·U; Mr/Ms = 0.50; HcJ reads
//     about 3 % low (HcJ/H_K ≈ 0.468 against the ensemble's 0.482), inside its U of about 4.5 %
//     (`acq/fixture` TestMagnetFiguresOnYoke, ~35 s, skipped with -short). That shortfall is the crossing
//     reading of `calib/loop` on coarse samples, not the level: the bench's noise-free truth of the same
//     curve, fed to `loop.Figures` every 20 ms (8 kA/m apart at 400 kA/m/s, next to the ensemble's
//     switching step at 0.5·H_K), gives 243 kA/m too; every 5 ms 251.6 kA/m, every 1 ms 250.7 kA/m.
//     Sample magnets densely near HcJ (slower sweeps or more points).
package process
