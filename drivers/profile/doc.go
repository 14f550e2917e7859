// Package profile describes any SCPI instrument as data: an instrument profile
// is a YAML command map (configs/instruments/*.yaml) naming, for each
// operation of a role, the command template, how to parse the reply, unit,
// scale and valid range. Generic Supply, Integrator, FieldMeter and
// Thermometer implementations are built from a profile.
//
// The simulated bench (drivers/sim) serves the same profiles, so a profile is
// exercised end to end without hardware.
//
// # Layers
//
// Dependencies point one way: `acq/sampler` → `drivers/instr` ← `drivers/profile` → `drivers/scpi` → `drivers/link`.
//
//	| package | knows | does not know |
//	| `drivers/link` | bytes on a serial line: open by device path or USB identity, line settings, timeouts, disconnects, reconnect with backoff, port listing from sysfs | SCPI, instruments |
//	| `drivers/link/linktest` | pseudo-terminal pairs in raw mode, a line responder, a movable by-id style symlink | — (test helper) |
//	| `drivers/scpi` | SCPI text over any `Stream`: terminators, NR1/NR2/NR3 numbers with the special values, blocks, IEEE 488.2 common commands, the error queue, a debug log of each exchange | which instrument it talks to |
//	| `drivers/scpi/scpitest` | a scripted conversation: each command the client must send and the reply; fails on a wrong command, an unscripted reconnect, and exchanges left over | — (test helper) |
//	| `drivers/profile` | instrument profiles (YAML command maps) and the generic Supply, Integrator, FieldMeter and Thermometer built from them | sweeps, recipes |
//	| `acq/sampler` | reading every channel of a fixture at once | command strings |
//
// Errors, matched with `errors.Is` / `errors.As` at any layer:
//
//   - `link.ErrTimeout` — no reply within the profile's `timeout` (the port stays usable); matches `instr.ErrTimeout`;
//
//   - `link.ErrDisconnected` — the device went away (unplug, hang-up, I/O error); distinct from `link.ErrClosed`, our own Close;
//     both, and `link.ErrNotFound`, match `instr.ErrLost`;
//
//   - `*scpi.InstrumentError{Command, Code, Msg, More}` — what the error queue held after a setting;
//
//   - `*scpi.ParseError{Reply, Want}` — a reply of the wrong form; wrapped in `*profile.OpError{Profile, Op, Command, Reconnected}`;
//
//   - `*profile.RangeError{Value, Min, Max, Unit}` — a setpoint (or reading) outside the profile's range; nothing is sent, nothing is clamped;
//
//   - `profile.ErrOverrange` — the instrument answered 9.9E37 / 9.91E37 / INF / NAN;
//
//   - `profile.ErrIdentity` — `*IDN?` does not contain the expected identity (also after a reconnect: the device then refuses all further operations).
//
//   - `scpi.ErrDesync` — a reply that does not parse for the query asked (a late reply, a garbled one, an error-queue
//     entry where a reading was due): never a value; the line is marked stale and `acq/sampler` reads again (it matches
//     `instr.ErrOutOfStep`).
//
//   - `*link.BusyError` (`link.ErrBusy`) — the port (or fixture) is locked by another opener; names the holder's PID.
//
// Resynchronisation (`drivers/scpi` `resync`, `QueryMatch`; `drivers/profile` `start`). After any broken exchange
// (timeout, `ErrDesync`, a write that failed) the next exchange first discards input until the line has been quiet
// for `Options.Quiet` (20 ms), then sends the profile's `sync_query` (default `*IDN?`) and discards lines until one
// contains `sync_reply` (default: the identity) — an answer no reading can be mistaken for — all within
// `SyncTimeout` (2 × the profile's timeout). A reply still on its way (an 800 ms delay behind a 500 ms timeout) is
// therefore read and dropped by the sync, never taken for the next query's answer. Opening an instrument, and every
// reconnect, drains the line first and reads `*IDN?` replies until one contains the identity, so replies left by a
// killed process are skipped; lines but no identity, three times running (a flipped byte is not another
// instrument), is `ErrIdentity` naming what came. The error queue is then read before the init sequence (whose
// `*CLS` would erase it) and what it held is returned by the next `PollErrors`; the engine polls with the first
// sample of a run, then every `error_poll`, and once more after the ramp-down. A supply that answers but
// fails identification is ramped down and sent its `safe_state` all the same (`profile.OpenProfile`), read back,
// loudly logged, and the open still fails.
//
// Profile keys added for safety: `sync_query`/`sync_reply`; `error_poll` (default `1s`, `off`): how often a run
// reads the error queue on its own (`Device.PollErrors`, `instr.ErrorPoller`); `error_severity` (code or
// `lo..hi` → `warn`|`fail`, exact code first, then the narrowest range; unmatched: `fail`); `trip_clear` (supply):
// what clears a latched trip, quoted in the run's reason.
//
// Locks (`drivers/link/lock.go`). `link.Open` takes `flock(LOCK_EX|LOCK_NB)` on
// `LockDir()/hystd-port-<real path>.lock` (symbolic links resolved) and holds it until `Close`, across reconnects;
// `daemon.Serve` and `daemon.RunOnce` take `hystd-fixture-<name>.lock` (`daemon.LockFixtures`). `LockDir()` is
// `$HYSTD_LOCK_DIR`, else `/run/lock`, else `os.TempDir()`. Root is bound too (flock has no bypass; the serial
// exclusive mode has one). Test binaries that start daemons set `HYSTD_LOCK_DIR` to a directory of their own in
// `TestMain` (`fixturetest.RunWithLockDir`, used by `acq/daemon` and `acq/api`: every test fixture has the same name); `link.Options.NoLock` exists for tools
// that must look at a held port.
//
// After a disconnect the profile device reconnects (backoff, USB identity resolved again, so a re-enumerated adapter is
// found), re-identifies and re-sends its init sequence, and *still returns the failed operation's error* with
// `OpError.Reconnected = true`. The engine decides what a lost reading means; the next call works.
//
// # Using it
//
//	sup, err := profile.OpenSupply(ctx, profile.Spec{Port: "/dev/ttyUSB0", Profile: "sim-supply"}, profile.Options{})
//	integ, err := profile.OpenIntegrator(ctx, profile.Spec{USB: &link.USB{VID: "1a2b", PID: "00c3", Serial: "BAY2-INT"}, Profile: "quill-integrator"}, profile.Options{})
//	s, err := sampler.NewWith(sampler.Roles{Supply: sup, Integrator: integ}, runStart, sampler.Options{Status: true})
//	rd, err := s.ReadAll(ctx) // rd.Sample: I, V, Psi, BProbe, TempC (NaN when absent), T, DtI, DtB, TUnc; rd.Status, rd.Overload
//
// `acq/sampler` is the one concurrent reader: the engine samples through it. Profile instruments
// (`instr.Overlapped`: a read can be started ahead, `scpi.Client.Ask`/`Await`) are read in an overlapped round in
// the caller's goroutine: every line's first query is written before any reply is read, a line's next query goes out
// when its reply is in (one query per instrument at a time, or up to the profile's `queued_queries` written back to
// back — `Device.BeginBehind`, `scpi.Client.AskBehind` — whose replies are used only when all of them are in),
// and a line is looked at without blocking
// (`link.Conn.ReadWithin`); no goroutine, channel or timer per read, and writes get a goroutine only with RTS/CTS flow
// control. go.bug.st/serial hides the descriptor, so Go's runtime poller cannot watch the ports. Other roles (test
// fakes) get one goroutine each. A reply that times out on a live line is read again (`sampler.Retry`, counted with
// `sampler.WithRetryCounter`) until the caller's context ends; a hang-up is returned at once as a
// `*sampler.RoleError` naming the role.
//
// `profile.Spec` mirrors `acq/config.Instrument` (Port or USB, Profile, Baud, Identity) as a plain struct.
// `profile.Options.HaltSlew` lowers the ramp-down rate to the fixture's limit.
//
// Halt (supply). Reads the current (falling back to the last setpoint sent), ramps to zero in steps of
// `halt_period` at `halt_slew_a_per_s` (or the fixture's lower limit), reads the current back every `halt_period`
// until it is within `Options.HaltZero` (default 5 mA + the read_current accuracy offset) of zero, for at most
// `Options.HaltSettle` (default 5 s), then sends `safe_state` — also when the current never got there, and the error
// then says how much was left. Cancelling the caller's context does not stop it; it is bounded by the ramp time plus
// 10 s. This is the only ramp-down: the engine's `SafeHalt` calls it and checks the read-back after.
// Caution: a magnetizing winding stores ½·L·I²; opening the circuit or switching the output off at full current drives
// a high voltage across winding and supply. Ramping first is what the software can do; it does not replace the supply's
// own protection, a discharge path across the winding, or the lab's interlocks. Wire and operate fixtures as local
// electrical-safety codes and licensed practice require.
//
// Timestamps. Each reading is stamped at the midpoint between sending the query and receiving the reply
// (monotonic clock), with half the round trip as its uncertainty. Each channel keeps its own time: a sample's `T` is the
// flux reading's midpoint (the current's on a fixture without an integrator), `DtI` and `DtB` are the offsets of the
// current's and the field meter's midpoints from it (positive: read later), and `TUnc` is the largest half round trip,
// the uncertainty of each channel's own time. Within an engine tick the setpoint is sent first and the engine waits
// until that setting is complete (written, the profile's `settle` waited, the error queue drained) before all channels
// are read together, so every channel of a sample sees the same setpoint. The processing then brings the current (or
// the probe field) to the flux reading's time: values between samples are interpolated linearly in time from the
// neighbouring samples of the same setpoint (correction `time-alignment`, its size the largest offset). Across a
// setpoint step a sample keeps its own reading: both of its readings came after the setting completed, and
// interpolating across the step would pull H towards the previous level (on the bench it narrowed HcB by ~0.1 A/m at
// 1 kA/m/s). The simulated supply's profile waits `settle: 4ms` after each setpoint, so each sample is a settled
// state of the staircase (the eddy currents of the 0.5 mm laminations hold B back for about a millisecond). The safety checks on I and V go by
// the current's own time, `T + DtI`.
//
// Ports. `hystd ports [--json]` lists serial ports with VID:PID, serial number, driver and `/dev/serial/by-id` names.
// It reads sysfs only and opens no device (probing a port by opening it can reset the line settings of a port in use).
// Pseudo-terminals are not listed. Modem lines (DTR/RTS) are left alone unless `link.Settings` sets them: a pty has none.
//
// # Adding an instrument profile, step by step
//
//  1. Copy the closest profile in `configs/instruments/` to `configs/instruments/NAME.yaml` (lower-case, digits,
//     dashes; `name:` must equal the file name). Names of profiles and commands are ours; do not copy a maker's.
//  2. Set `role` (supply, integrator, field_meter, thermometer), `serial` (baud, data_bits, parity none/even/odd/mark/space,
//     stop_bits "1"/"1.5"/"2", flow none/rtscts; `dtr`/`rts` true/false only for adapters that need
//     the modem lines driven — leave them out for ptys), `terminators` (write and read; `"\n"`, `"\r\n"`, `"\r"`), `timeout`
//     (per reply, with a unit), `queued_queries` (how many queries the instrument accepts before its first reply is
//     read, answering them in order; default 1 — keep 1 unless the instrument is known to queue them: an IEEE 488.2
//     instrument may discard an unread reply when a new query arrives, and every bundled real-instrument profile has 1),
//     `identity` (a text the `*IDN?` reply contains), `error_query` (empty if there is no queue;
//     a reply is `code,"message"` or a bare code, 0 meaning empty), `init` and `safe_state` commands.
//  3. For each operation of the role, give `query:` or `set:`. Required: supply `set_current`, `read_current`,
//     `read_voltage`, `set_output` (optional `read_status`); integrator `reset`, `read_flux` (optional `set_range`,
//     `read_overload`); field meter `read_field` (optional `set_range`, `zero`); thermometer `read_temperature`.
//     - settings: `{}` marks the value; `format` is a Go verb (`%g`, `%.6E`, `%+.4f`, `%d`); the SI value is divided by
//     `scale` first; `range: [min, max]` in SI is required for `set_current` and `set_range` and is enforced;
//     `map` turns on/off into the instrument's words, or lists discrete settings (`{"0.01": "3"}`: only those values).
//     - queries: `parse: number` (NR1/NR2/NR3), `number-unit` (`"12.5 mT"`, with `suffixes: {T: 1, mT: 1.0e-3}`),
//     `field:N` (N-th field from 1 of `"status,value"`, `separator` default ","), `bool` (with `map` or 1/0/ON/OFF),
//     `int` (with `bits` for the status register: compliance, overtemp, trip, output); `scale` turns the
//     instrument's unit into SI; `unit` is the SI unit (A, V, Wb, T, °C); `range` rejects impossible readings;
//     `accuracy: {gain, offset}` (k = 2) feeds the uncertainty budget (`Profile.AccuracyOf`).
//     - `settle` waits after a setting; `poll`/`poll_done` repeat a query until done (`poll_period`, `poll_timeout`).
//  4. Supplies: `halt_slew_a_per_s`, `halt_period`, and a `safe_state` that leaves zero current, output off.
//     Integrators and field meters that sample on their own clock: an optional `buffered:` section (arm, start,
//     done, fetch as a definite-length block in `ascii`/`float32-le`/…, clock, `trigger_time`, the
//     instrument's own `trigger_latency` as a duration with a unit); its keys and the engine's alignment model
//     are in the doc comments of `drivers/profile/buffered.go` and `acq/engine/buffered.go`. Supplies that
//     can ramp to a setpoint at a programmed rate: an optional `ramp:` section (`rate`, `off`;
//     `drivers/profile/ramp.go`, used by `sweep_mode: ramp`, `acq/engine/ramp.go`).
//  5. `hystd check configs/instruments/NAME.yaml` (prints `FILE:LINE: key: problem` for each problem) and
//     `go test ./drivers/profile` (every shipped profile is loaded by `TestShippedProfilesLoad`).
//  6. Add a scripted test beside `supply_test.go` / `roles_test.go`: a `dialect` with the startup exchanges and one
//     case per operation, including an error-queue error, a garbled reply, a timeout and an overflow value.
//
// Shipped: `sim-*` (the simulated bench, `"\n"`, NR3), `slate-supply`, `slate-fieldmeter` (`"\r\n"`, unit-suffixed
// replies, own command tree, RTS/CTS, discrete field ranges), `quill-supply`, `quill-integrator` (`"\r"`, 7E1,
// `"status,value"` replies in mA and µV·s, bare-code error queue, busy polling, range codes).
//
// # Tests, fuzzing, benchmarks
//
//   - `go test ./drivers/... ./acq/sampler` — scripted conversations for every profile operation; link tests on real
//     ptys (timeout, cancel, close vs. hang-up, reconnect to a moved by-id link) and on a fake sysfs tree (listing,
//     USB resolution, ambiguity); end-to-end over ptys through go.bug.st/serial (set/read current, reset/read
//     integrator, read field, Halt, hang-up in the middle of a query).
//   - Fuzz: `go test ./drivers/scpi -fuzz FuzzParseNumber`, `-fuzz FuzzParseBlock`, `go test ./drivers/profile -fuzz
//     FuzzParseReply`; seed corpora in each package's `testdata/fuzz/`.
//   - Benchmarks: `go test -run X -bench . ./drivers/scpi ./acq/sampler`.
//
// Figures (AMD EPYC, 2 cores shared with other engineers' builds and tests, so they vary by up to 2× between runs;
// Go 1.26.8; ptys have no baud-rate limit unless emulated, and the "instruments" are goroutines in the same process,
// competing for the same 2 cores). Ranges over 3–6 runs each:
package profile
