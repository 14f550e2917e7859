// Package engine runs an expanded recipe on one fixture: setpoints at a fixed
// period, every channel sampled concurrently and stamped, safety checked on
// every sample, each recorded loop processed and committed as it completes,
// progress published live, and on every ending — finish, abort, failure,
// SIGTERM, cancelled context — the supply ramped to zero at its slew limit
// and its output turned off before the run's final state is recorded.
//
// Prepare validates a recipe against the fixture and records the run as
// queued; Plan.Execute runs it. Run does both. One Plan is executed once, by
// one goroutine; different fixtures' plans may run concurrently.
//
// # Recorded steps: tips on the sample grid, loops aimed at a peak
//
// The engine samples a step once every `Period` from the step's start (acq/engine, the sweep loop). A recorded
// step's program (`recipe.recordProgram`) lengthens the pre hold so that it ends on a whole period and makes
// every sweep leg a whole number of periods (rounded up: never faster than the recipe's rate), so samples fall
// on the sweep's start, its reversals and its end. `Step.At` labels a sample by its slot (t rounded down to a
// period, so a late reading keeps its slot's phase) and puts the sweep's end in the sweep: a loop's first and
// last sweep samples are its top tip and it is closed there. `acq/recipe` `checkTipsOnGrid` checks every sample
// plan; `acq/engine` `TestTipsInTheSweep` on the ring bench (150 points per sweep): Hmax 500.00000 ± 0.31 A/m
// against the truth 500.00004 A/m; before, with the tip samples in the holds, −0.34 % (150 points), −0.50 %
// (200), −0.25 % (400).
//
// A `record_loop` with `peak:` expands to one Record step carrying `Step.Aim` (target, tolerance, tries,
// first and largest amplitude); its limits are checked for a loop at the fixture's max current, so
// `PeakCurrent` is that current. The engine (`acq/engine/aim.go`) runs tries as Record steps built by
// `Step.AtAmplitude` through the ordinary step loop; `storeLoop` hands a try's samples back (`exec.tryRaw`)
// instead of storing it, and the try is processed with the run's processor to read its Bmax (J: Bmax −
// μ0·Hmax). Then `Step.ConditionAt` (two cycles), the recorded loop, and a ramp back to the planned level
// (`st.End()`, where the next step starts). Each try runs one cycle at its amplitude first: the tip of a loop
// right after one at another amplitude remembers it (without that cycle the J search below took 9 tries).
// `TestPeakAimedOnBench` (simulated ring, first try 300 A/m): B 1.2 T ± 10 mT at 199.87 A/m, truth tip B
// 1.19906 T, Bmax 1.20146 ± 0.0050 T, Hmax 199.869 ± 0.123 A/m against the truth 199.869 A/m; J 1.0 T ± 5 mT
// at 150.94 A/m, truth J 0.99680 T, Hmax 150.943 ± 0.093 A/m against 150.943; 2.6 T ends "not reachable …
// 2.016 T at … 10 A" with the bench at 0 A, output off. `TestPeakAimedCoverage` (`HYSTD_COVERAGE=aimed`, 40
// seeds, 7 min at load 13): U covers the truth for Hmax in 40 of 40 (worst |error|/U 0.00) and Bmax in 40 of
// 40 (worst 0.50; Bmax reads about +2.4 mT above the truth on every seed, inside U).
package engine
