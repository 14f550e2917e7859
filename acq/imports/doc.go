// Package imports turns a raw recording made elsewhere (a CSV of time,
// current and integrator flux, optionally probe field, temperature and
// phase) into a stored run, processed exactly as a live run's loops are
// (package acq/process). It reads files and writes to a record.Writer; the
// numerics stay in acq/process and calib.
//
// # Imports and calibration records (acq/imports, acq/calrec)
//
// `imports.ReadRaw` reads a raw recording (t, I, psi, optional B_probe, temp, phase; units in the header through
// `calib/units`, so "psi (uV s)" and "I (mA)" are SI prefixes, not special cases) into `record.Sample`s;
// `Split` cuts it into loop steps by its phase column, or, without one, finds the static holds at the start and
// end from the current standing still (`StillFraction` = 0.1 % of the largest |I|, at least 5 samples).
// `Prepare` runs the `Stepper` (`calrec.Use`, then per step `Used.Correct` and `process.Loop`) — the live path's function, with the live path's
// `process.SetupFrom` — on each step and builds the run (recipe `import`, provenance "imported from FILE (sha256
// …)" in `RecipeText`, the config snapshot and the first event); `Store` writes it. Everything is read and processed
// before the store is opened, so a refused file leaves nothing (not even an empty `hystd.db`). The daemon's
// `Import` (behind `POST /api/v1/imports`, an optional `api.Importer` of the Runner) does the same with the
// config's fixtures and specimen registry and the grade writer.
//
// Tests (`acq/imports`): the exact case is a tanh loop B = Bs·tanh((H ± Hc)/a) written as a raw recording through
// H = N1·I/l and ψ = N2·A·B with a 20 µV integrator offset (0.48 T of drift over the sweep) and a start level, with
// and without phase labels, with and without noise; Hmax, Bmax, Br, HcB, HcJ, μa within 0.1 % and the loss within
// 0.5 % of their closed forms (derived in the test's comment), and the drift baseline equal to Vos·T/(N2·A) within
// 1 %. Measured (noise-free, phase labels): Br 1.446036 T vs 1.4460414 exact, HcB 99.998 vs 100 A/m, HcJ 100.0023 vs
// 100.0042 A/m, loss 600.018 vs 600.000 J/m³. `TestImportCalibration`: an integrator gain g divides Bmax, Br, μa and
// the loss by g to 1e-9 and leaves Hmax and HcB unchanged; the record's u(g)/g shows in Br's budget; a record past its
// due date adds the warning event. `calrec` tests: loader errors at FILE:LINE, the due-day boundary, the formulas
// of `Apply` on one sample computed by hand.
//
// Live runs take the same `calrec.Used`: `fixture.Opened.Calibrations` selects the records of the daemon config's
// `calibrations` folder by fixture and by the `*IDN?` replies read at the open (`engine.Identities`), the
// processor corrects each loop's raw samples with `Used.Correct` before `process.Loop`, and the daemon and `run`
// record the events and apply `calibration_past_due` (`daemon.useCalibrations`) before `Execute`.
// `TestCalibrationOnBench` and `TestDaemonRefusesPastDueCalibration` (`acq/daemon`, simulated bench) check the
// 1/g scaling against the run's own stored raw samples, the warning, and the refusal by the bench's truth.
// Re-processing (acq/reprocess) applies an imported run's records, which its config stores. A live run's config is
// written before its instruments open and holds none: its events name the records it used (`calrec.UsedPrefix`,
// with target, certificate, date and due date), and re-processing takes each from the daemon config's
// `calibrations` folder, refusing the run, naming the record, when one is missing there or its `Describe` differs
// from what the run recorded; the records go through `calrec.Use` and `fixture.Offline`, the live path.
// `TestReprocessCalibratedRun` (`acq/daemon`, simulated bench) checks the exact halving with the record applied
// in both revisions and both refusals.
package imports
