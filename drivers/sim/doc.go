// Package sim is the simulated bench: each instrument of a fixture served on
// its own pseudo-terminal, speaking SCPI as its instrument profile says,
// backed by the physics of drivers/sim/physics and advanced by the bench's
// clock. Clients (the real drivers, or any serial program) open the slave
// paths from Ports exactly as they would open a USB adapter. The bench knows
// the truth of its specimen and tells it to tests through Truth and
// History, never through the ports.
//
// Safety: the bench drives no hardware. Its supply model trips and ramps
// down like a real one, but a recipe dry-run here says nothing about the
// energy a real winding stores (½·L·I²) or the voltage an interrupted
// current induces: on a real fixture follow the lab's interlocks, local
// codes and licensed electrical practice.
//
// # Using it
//
//	cfg, err := sim.DefaultBench()            // or sim.LoadBench("configs/bench-demo.yaml")
//	b, err := sim.Start(ctx, cfg)             // sim.WithClock(clk) to drive time yourself
//	defer b.Close()                           // also closed when ctx is cancelled
//	ports := b.Ports()                        // role → "/dev/pts/N": put into fixture instruments.<role>.port
//	t := b.Truth()                            // true I, H, B, J, M, ψ, winding temperature, supply flags
//	h := b.History()                          // one Truth per physics step, oldest first
//
// `hystd sim [--bench FILE]` prints one line `{"role":"supply","port":"/dev/pts/N"}` per instrument and
// serves until SIGINT/SIGTERM. A bad bench file exits with code 2 and `FILE:LINE: key: problem`.
//
// Time: physics advances to the bench clock's present before every command (and, on the real clock, every
// 10 ms in the background). With a `*clock.Sim` (`sim.WithClock`) the bench is simulated time's partner: time
// moves only while no command line is unread or being answered on any of its ptys, and a delayed reply waits in
// simulated time; each role draws its reading noise from its own seeded stream, so concurrent reads reaching the
// bench in any order give the same values. `clock.NewManual(t0)` (package `drivers/clock`) with `Advance(d)` makes physics and delayed replies follow
// the test exactly; a test sends `CMD;*OPC?` and reads the `1` to know a setting was applied before it
// advances the clock.
//
// # Ports
//
// Each port is a pty pair opened from `/dev/ptmx` with `O_NONBLOCK` (the master is polled by the Go
// runtime, so deadlines and `Close` work), unlocked (`TIOCSPTLCK`), numbered (`TIOCGPTN`) and made raw on
// the slave before anything is written. The bench keeps its own slave fd open, so clients may close and
// reopen the path at will; EIO on the master (no slave open) is waited out. A hang-up fault uses
// `TIOCVHANGUP` (needs CAP_SYS_ADMIN, i.e. root as in CI): every client fd is hung up (reads end, writes
// give EIO, go.bug.st/serial reports "Port has been closed") and the path can be reopened at once.
//
// # Serving a profile
//
// Each role holds an instrument profile (`configs/instruments/*.yaml`, or a path). Incoming lines end with
// the profile's write terminator; replies end with its read terminator. Several commands may share a line,
// separated by `;`; their replies are joined with `;`. Matching is case-insensitive with blanks collapsed.
//
//   - Settings: a template's `{}` takes the argument. With `map`, the argument is looked up among the map's
//     instrument-side values; otherwise it is a number, multiplied by `scale` to SI and checked against
//     `range` (`-222,"Data out of range"`). A bad word or number is `-104,"Data type error"`, a missing
//     argument `-109`, a surplus one `-108`, an unknown command `-113,"Undefined header"`.
//   - Queries reply per `parse`: `number` as `%.6E` of value/scale; `number-unit` adds ` UNIT`; `field:N`
//     gives N+1 comma-separated fields that all carry the value; `bool` through `map` (or 1/0); `int`; `enum`.
//     A field reading over range replies `9.9E37` (the SCPI overflow value).
//   - IEEE 488.2 commons: `*IDN?` (four fields: the profile identity's maker and model, `SIMnnnnn`, `1.0`),
//     `*RST`, `*CLS`, `*OPC`, `*OPC?`, `*WAI`, `*ESR?`, `*ESE`, `*ESE?`, `*STB?` (bit 2 error queue not empty,
//     bit 5 ESB, bit 6 MSS), `*TST?`. The profile's `error_query` pops the queue (`0,"No error"` when empty;
//     ten entries, then `-350,"Queue overflow"`). ESR bits follow the error class (CME, EXE, DDE, QYE); PON
//     is set at start.
//   - A profile with an operation the bench does not simulate is refused when the bench is loaded.
//
// # Models (drivers/sim/physics, pure, stepped with explicit dt)
//
//	| model | form and source | tested against |
//	| Jiles–Atherton | Jiles & Atherton, JMMM 61 (1986) 48, in the form of Jiles, Thoelke & Devine, IEEE Trans. Magn. 28(1):27 (1992): He = H + αM, M_an = Ms·L(He/a), dM/dH = δ_M(M_an−M)/((1+c)(δk − α(M_an−M))) + c/(1+c)·dM_an/dHe, δ_M gating; RK4 in H, ≤ 1 A/m steps | REFERENCE.md check 14 (computed, no published value): Bmax 1.7331 T, Br 0.7382 T, Hc 407.1 A/m, W 2850 J/m³ ±0.5 % |
//	| Stoner–Wohlfarth | Phil. Trans. R. Soc. A 240 (1948) 599; e(θ) = ½sin²(θ−ψ) − h·cosθ, each moment follows its local minimum; aligned axes or random (cos ψ uniform, midpoint rule) | aligned: square loop, Hc = H_K; random: Mr/Ms = 0.5, HcJ/H_K = 0.479 ±1 % (converges to 0.4822); astroid switching field at 45° = 0.5 H_K |
//	| geometry | ring on mean path π(D+d)/2 (IEC 60404-4) or l_e, A_e (IEC 60205); Epstein A = m/(4lρ), l_m 0.94 m (IEC 60404-2); yoke H = η·N1·I/gap | REFERENCE.md checks 4, 6, 7 |
//	| supply and winding | slew limit; V = R(T)·I + L·dI/dt held at compliance (current then lags as the L–R response); copper +0.39 %/K; C·dT/dt = I²R − (T−T_a)/R_th; warning and trip temperatures; a trip latches output off and ramps to zero | first-order L–R step response; trip temperature |
//	| eddy currents | classical thin-sheet field H_e = (σd²/12)·dB/dt, solved semi-implicitly with the last differential permeability | extra loop area = ∫(σd²/12)(dB/dt)²dt within 10 % |
//	| integrator | reading = (1+gain error)·(ψ − ψ_reset) + V_os·(t − t_reset) + noise, ψ = N2·(B·A + μ0·H·(A_c − A)); clipped at range with latched overload until reset | REFERENCE.md checks 9 (drift) and 11 (air flux) |
//	| field meter | (1+sensitivity error)·μ0·H + offset − zero + noise; over range → 9.9E37; zero nulls the present reading | |
//
// # Bench file (kind: bench)
//
//	kind: bench
//	name: …
//	seed: 17                 # every random draw (noise, random faults)
//	step: 1ms                # physics step, ≤ 10ms
//	history: 200000          # truth samples kept
//	instruments:             # role → profile (name in configs/instruments or a path); default all four sim-*
//	  supply: {profile: sim-supply}
//	winding: {n1, n2, coil_area_mm2 (0: = A), resistance_ohm (20 °C), inductance_h,
//	          heat_capacity_j_per_k, thermal_resistance_k_per_w, ambient_c}
//	supply: {max_current_a, compliance_v, slew_a_per_s, overtemp_c, trip_c}
//	specimen:
//	  model: jiles-atherton | stoner-wohlfarth
//	  geometry: {shape: ring|epstein|yoke,
//	             ring: {outer_diameter_mm, inner_diameter_mm, height_mm, path: mean|effective, stacking_factor},
//	             epstein: {mass_kg, strip_length_mm, density_kg_m3, path_length_mm},
//	             yoke: {gap_mm, area_mm2, efficiency}}
//	  jiles_atherton: {ms_a_m, a_a_m, k_a_m, c, alpha}
//	  stoner_wohlfarth: {ms_a_m, hk_a_m, easy_axes: aligned|random, particles}
//	  eddy: {conductivity_s_m, thickness_mm}      # optional
//	integrator: {offset_v, gain_error, noise_wb, range_wb}
//	field_meter: {offset_t, sensitivity_error, noise_t, range_t}
//	thermometer: {offset_c, noise_c}
//	faults: […]
//
// Loading is strict (`configs` loader): unknown keys, wrong types, durations without unit and values out
// of range are `FILE:LINE: key: problem` (goldens in `testdata/bad/`). Samples: `configs/bench-demo.yaml`
// (the demo ring, embedded as `sim.DefaultBench()`; JA parameters chosen here for a plausible non-oriented
// steel loop, Hc ≈ 50 A/m quasi-static), `configs/bench-faults.yaml` (one of each fault),
// `configs/bench-magnet.yaml` (a hard-ferrite disc in a yoke, Stoner–Wohlfarth random ensemble, H from
// the Hall probe). The demo ring's eddy term is real at fast sweeps: a ±2 A loop in 0.4 s shows
// Hc ≈ 63 A/m instead of 50 A/m, which is the quasi-static check of REFERENCE.md §2 at work.
//
// # Fault injection
//
//	faults:
//	  - {role: integrator, kind: drop, after_commands: 5}
//	  - {role: thermometer, kind: delay, delay: 2s, after_commands: 2}
//	  - {role: field_meter, kind: garble, probability: 0.01, times: 3}
//	  - {role: field_meter, kind: error, at: 10s, code: -310, message: "System error"}
//	  - {role: integrator, kind: hangup, at: 20s}
//	  - {role: supply, kind: trip, at: 30s}
//
// One trigger per fault: `at` (bench time since start), `after_commands: N` (the N-th command line of the
// role, and every N-th while `times` allows), or `probability` (per command line, from the seed). `times`
// caps the firings (default 1; unlimited for `probability`). `drop`, `delay` and `garble` arm at the
// trigger and spoil the next reply (garble flips bit 6 of one byte, which no number parser accepts);
// `hangup`, `error` (pushed into the error queue, default `-300,"Device-specific error"`) and `trip` (supply
// only: output off, latched until `*RST` once the winding is below `overtemp_c`) act at once. `no_trigger`
// (the next trigger of a timed acquisition is lost) and `short_buffer` (the next buffer fetched lacks its last
// quarter) are for an integrator or a field meter with a `buffered:` profile (`drivers/sim/buffered.go`), as
// is `late_trigger` (with `delay`: the next trigger takes effect that long after its command arrives, as
// behind a serial adapter that holds bytes back; the instrument's `trigger_time` query still reports the
// instant on its clock). The integrator and the field meter start their first buffered reading 2 ms and
// 3.5 ms (their own trigger latencies, which their profiles state) after the trigger, on their own clocks.
// The supply's `ramp:` section (`drivers/sim/ramp.go`): with a rate set, its current moves to each new
// setpoint at that rate on its own clock (60 ppm fast) and reads at the present instant.
//
// At run time: `Bench.Inject(fault)` adds one (no trigger: a reply fault spoils the role's next reply, the others
// act at once), `Bench.Injected()` counts fired faults by kind, `Bench.Report()` is the truth as `hystd sim --truth`
// serves it (`GET /truth`; `POST /faults` takes a JSON array and calls `Inject`), and `sim.MakeLinks` makes the
// `--links` symlinks. The bench keeps what a real line keeps: a reply not read before the client closed, or sent
// after it closed, waits on the line for the next opener (`TestStaleLineSurvivesReopen`).
//
// What the drivers see (tested through `drivers/link` + `drivers/scpi`): drop and delay → `link.ErrTimeout`;
// garble → `*scpi.ParseError`; hangup → `link.ErrDisconnected`, then `Reconnect` works; error →
// `*scpi.InstrumentError` with the code; trip → the trip bit in the status register, and `OUTP ON` →
// `-221,"Settings conflict"`.
package sim
