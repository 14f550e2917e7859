// Package clock is the one time source of a bench session: the simulated
// bench's physics and fault triggers, the engine's setpoint periods and
// holds, the drivers' reading stamps and settle waits, the safety checks'
// rates and the closed-loop field control all read the same Clock.
//
// Three implementations:
//   - Real: the machine's monotonic wall clock (production, `hystd sim`,
//     the demo by default).
//   - Sim: simulated time. It stands still while anyone is working and jumps
//     to the next wake-up once every actor sleeps and every line is quiet,
//     so a 25 s recipe runs as fast as the pseudo-terminals carry the bytes
//     and, with the same bench seed, stores the same samples on any machine
//     at any load.
//   - Manual: moves only when a test says so (Advance) or when its one
//     sleeper asks (SleepUntil jumps), for in-memory fakes and unit tests.
//
// The package imports nothing of the project, so drivers and acq can share it.
//
// One clock per bench session, injected everywhere time matters: the bench's physics and timed faults
// (`sim.WithClock`), the drivers' reading stamps, settle, poll and halt waits (`fixture.OpenClock` sets
// `profile.Options.Now` and `Sleep`), the engine's setpoint periods, holds and event times (`engine.Setup.Clock`),
// and through the stamps the sampler's `T`, the safety checks' rates and the closed-loop field control. The
// contract is two methods, `Now()` and `SleepUntil(ctx, t)`; the package imports nothing of the project.
//
//   - `clock.Real` — the machine's monotonic clock: production, `hystd serve`/`run`, `hystd sim` (outside clients
//     bring their own time), `hystd demo` by default.
//   - `clock.Sim` — simulated time, a discrete-event clock. Time stands still while anybody works and jumps to the
//     earliest wake-up once (1) every *actor* sleeps in `SleepUntil` — by default exactly one actor: the engine's
//     goroutine, with the drivers it calls (`Join` adds more); (2) every registered quiet check passes — the bench
//     registers one that holds while any pty master has unread bytes (`TIOCINQ`) or a command line is being executed or
//     answered; (3) no woken passive waiter is still acting. Passive waiters (`clock.Passive`: the bench's delayed
//     replies, the daemon's scheduler) do not hold time back; once woken, one holds the clock until it calls `done`.
//     Equal wake-ups are served in the order they were registered.
//   - `clock.Manual` — moves only on `Advance` (passive waiters follow), or jumps on `SleepUntil`: the in-memory fakes
//     of `acq/engine/enginetest` and the bench's unit tests.
//
// Why it is deadlock-free and deterministic: the engine sleeps only after every reply it waited for has arrived (the
// sampler's `ReadAll` returns after all roles), so when the one actor sleeps, the only bytes that can still be on
// a line are commands the bench has not read (the quiet check waits for them) or late replies nobody waits for
// (ignored: bytes the bench wrote and nobody read do not hold time). Between two sleeps of the engine the instant is
// fixed, so every command of one setpoint is answered from the physics at that instant, whatever the order in which
// the sampler's queries reach the bench; reads in flight always see one consistent instant. Serial read
// timeouts and the engine's per-sample bound stay in real time and are made generous in simulated time
// (`fixture.SimReadTimeout` 5 s, `engine.SimCommTimeout` 10 s), so load never makes a prompt reply look lost.
// Consequences to know: all channels of a sample carry the same stamp (`DtI = DtB = TUnc = 0`, the exact instant);
// a reply the bench *delays* by up to 3× its profile's timeout is a late reply: the client's read times out (one real
// read timeout) and the held reply goes out when the client writes its next line, before that line's reply
// (`drivers/sim` `TestLateReplyInSimulatedTime`); a longer delay holds the line until the engine's bound;
// a `drop` costs one real read timeout. One `clock.Sim` drives one fixture: two engines sleeping on one clock would
// each count as the actor.
//
// `hystd demo --speed max` is the user's way in (`demo.Options.Clock`); `daemon.Wiring.Clock` gives `serve` and `run`
// a clock shared with a bench in the same process (the daemon's bench tests).
//
// Across a process boundary (a `hystd serve` child against a bench in the test process, as a fault campaign with
// `kill -9` restarts needs): the test process serves its `clock.Sim` with `clock.Handler(sim)` on loopback
// (`GET /now`, `POST /sleep?until=NS`) and starts the child as `hystd serve --config F --sim-clock http://ADDR`
// (a hidden flag). The child's `clock.Remote` sends every `Now` and each sleep of its engine and drivers there; the
// bench's quiet check needs nothing new, since it looks only at its own pty masters. A killed child's pending sleep
// is withdrawn when its connection drops, so time stands still until the next child sleeps (a restart's halt runs
// at the instant of the kill). The child counts as the one actor: do not let the test's own goroutines sleep on the
// same clock while a child runs. Simulated time (in-process or remote) is refused by `fixture.OpenClock` unless every
// instrument's port resolves to a pseudo-terminal (`/dev/pts/N`): on a real supply it would send setpoints as fast
// as the line allows. Tested: `drivers/clock` `TestRemote` (in-process server) and `cmd/hystd`
// `TestServeChildOnSimulatedTime` (`HYSTD_CHILD_TESTS=1 go test -run TestServeChildOnSimulatedTime ./cmd/hystd`:
// builds hystd, runs `serve --sim-clock` as a child on a bench in the test process; a 4 s loop finished in about 3 s
// of real time with the bench's truth at zero; kill -9 restarts are left to the campaign).
package clock
