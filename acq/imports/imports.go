package imports

import (
	"bytes"
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"math"
	"path/filepath"
	"regexp"
	"time"

	"go.yaml.in/yaml/v3"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/process"
	"hystd/acq/record"
	"hystd/calib/loopcsv"
)

// StillFraction is how far the current may move, as a fraction of the
// recording's largest |I|, and still count as standing still when the
// static holds at the start and end are found from the current (files
// without a phase column).
const StillFraction = 1e-3

// minHold is the fewest samples a hold found from the current needs to
// give a drift rate (process fits three terms to it).
const minHold = 5

// Split assigns phases (when the file has none) and cuts the recording into
// loop steps. With a phase column, a step is a run of pre samples, then
// sweep samples, then post samples; a pre sample after a sweep or post
// sample starts the next step. Without one, the recording is one step whose
// pre hold is the leading samples with the current within StillFraction of
// the largest |I| of the first sample's, its post hold the trailing ones
// likewise (a hold needs at least 5 samples; shorter ones are sweep).
// Errors name the file and line.
func Split(r Raw, name string) ([][]record.Sample, [][]int, error) {
	s := r.Samples
	if !r.HasPhase {
		imax := 0.0
		for _, x := range s {
			imax = math.Max(imax, math.Abs(x.I))
		}
		tol := StillFraction * imax
		pre := 0
		for pre < len(s) && math.Abs(s[pre].I-s[0].I) <= tol {
			pre++
		}
		post := len(s)
		for post > 0 && math.Abs(s[post-1].I-s[len(s)-1].I) <= tol {
			post--
		}
		if pre < minHold {
			pre = 0
		}
		if len(s)-post < minHold {
			post = len(s)
		}
		if pre >= post {
			return nil, nil, &loopcsv.Error{File: name, Column: "I", Msg: "the current never moves: no sweep"}
		}
		out := make([]record.Sample, len(s))
		copy(out, s)
		for i := range out {
			switch {
			case i < pre:
				out[i].Phase = record.PreHold
			case i >= post:
				out[i].Phase = record.PostHold
			default:
				out[i].Phase = record.Sweep
			}
		}
		return [][]record.Sample{out}, [][]int{r.Line}, nil
	}
	var steps [][]record.Sample
	var lines [][]int
	start := 0
	order := map[record.Phase]int{record.PreHold: 0, record.Sweep: 1, record.PostHold: 2}
	for i := 1; i <= len(s); i++ {
		if i < len(s) && order[s[i].Phase] >= order[s[i-1].Phase] {
			continue
		}
		if i < len(s) && s[i].Phase != record.PreHold {
			return nil, nil, &loopcsv.Error{File: name, Line: r.Line[i], Column: "phase",
				Msg: fmt.Sprintf("%q after %q: a step runs pre, sweep, post; a new one starts with pre", s[i].Phase, s[i-1].Phase)}
		}
		steps = append(steps, s[start:i])
		lines = append(lines, r.Line[start:i])
		start = i
	}
	for k, st := range steps {
		n := 0
		for _, x := range st {
			if x.Phase == record.Sweep {
				n++
			}
		}
		if n < 3 {
			return nil, nil, &loopcsv.Error{File: name, Line: lines[k][0], Column: "phase", Msg: fmt.Sprintf("step %d has %d sweep samples (need at least 3)", k+1, n)}
		}
	}
	return steps, lines, nil
}

// Options are the inputs of Import.
type Options struct {
	File     string // path of the recording, for the provenance
	Data     []byte // its content
	Fixture  config.Fixture
	Specimen config.Specimen
	Software string
	Operator string
	Now      time.Time // when the import is recorded
	Writer   record.Writer
	// Calibrations are applied to every step (imports.Stepper); each is
	// recorded in the run's events, one past due at Now as a warning.
	Calibrations []calrec.Record
}

var idUnsafe = regexp.MustCompile(`[^A-Za-z0-9._-]+`)

// Provenance is the text stored with an imported run: "imported from FILE
// (sha256 HEX)".
func Provenance(file string, data []byte) string {
	sum := sha256.Sum256(data)
	return fmt.Sprintf("imported from %s (sha256 %s)", filepath.Base(file), hex.EncodeToString(sum[:]))
}

// Prepared is a recording read and processed, ready to be stored.
type Prepared struct {
	Run    record.Run
	Loops  []record.Loop
	Events []record.Event
}

// Import reads, processes and stores a raw recording as a finished run with
// one loop per step: Prepare, then Store. A bad file, or a step the
// processing refuses, stores nothing.
func Import(ctx context.Context, o Options) (record.Run, []record.Loop, error) {
	p, err := Prepare(o)
	if err != nil {
		return record.Run{}, nil, err
	}
	if err := p.Store(ctx, o.Writer); err != nil {
		return record.Run{}, nil, err
	}
	return p.Run, p.Loops, nil
}

// Prepare reads and processes the recording of o (o.Writer is not used).
// The run's Recipe is "import", its RecipeText the provenance ("imported
// from FILE (sha256 HEX)"), its Config the fixture and specimen under the
// provenance line; the first event is the provenance.
func Prepare(o Options) (*Prepared, error) {
	raw, err := ReadRaw(bytes.NewReader(o.Data), o.File)
	if err != nil {
		return nil, err
	}
	steps, lines, err := Split(raw, o.File)
	if err != nil {
		return nil, err
	}
	stepper, warns, err := NewStepper(o.Fixture, o.Specimen, o.Calibrations, o.Now)
	if err != nil {
		return nil, err
	}
	prov := Provenance(o.File, o.Data)
	// A random suffix, as live runs have: the same file imported twice in
	// one second makes two runs.
	var rnd [3]byte
	_, _ = rand.Read(rnd[:])
	id := fmt.Sprintf("%s-import-%s-%s", idUnsafe.ReplaceAllString(o.Fixture.Name, "_"), o.Now.UTC().Format("20060102T150405Z"), hex.EncodeToString(rnd[:]))
	calEvents := stepper.Events()
	var loops []record.Loop
	for k, st := range steps {
		pts, figs, corr, err := stepper.Step(st)
		if err != nil {
			return nil, &loopcsv.Error{File: o.File, Line: lines[k][0], Msg: fmt.Sprintf("step %d (lines %d–%d): %v", k+1, lines[k][0], lines[k][len(lines[k])-1], err)}
		}
		amp := 0.0
		for _, x := range st {
			if x.Phase == record.Sweep {
				amp = math.Max(amp, math.Abs(x.I))
			}
		}
		loops = append(loops, record.Loop{RunID: id, N: k + 1, Kind: "loop", Amplitude: amp, AmpUnit: "A",
			Started: o.Now, Raw: st, Points: pts, Figures: figs, Corrections: corr})
	}
	var cfg bytes.Buffer
	fmt.Fprintf(&cfg, "# %s\n# fixture\n", prov)
	if y, err := yaml.Marshal(o.Fixture); err == nil {
		cfg.Write(y)
	}
	cfg.WriteString("---\n# specimen\n")
	if y, err := yaml.Marshal(o.Specimen); err == nil {
		cfg.Write(y)
	}
	for _, c := range o.Calibrations {
		fmt.Fprintf(&cfg, "---\n# %s from %s\n", c.Describe(), c.File)
		if y, err := yaml.Marshal(c); err == nil {
			cfg.Write(y)
		}
	}
	chash := sha256.Sum256(cfg.Bytes())
	run := record.Run{ID: id, Recipe: "import", RecipeText: prov, Fixture: o.Fixture.Name,
		Specimen: o.Specimen.ID, Material: o.Specimen.Material, Grade: o.Specimen.Grade, Operator: o.Operator,
		Config: cfg.String(), ConfigHash: hex.EncodeToString(chash[:]), Software: o.Software,
		State: record.Queued, Queued: o.Now}
	events := []record.Event{{RunID: id, At: o.Now, Level: "info", Text: prov + fmt.Sprintf(", %d rows, %d step(s), columns %v", len(raw.Samples), len(steps), raw.Columns)}}
	if !raw.HasPhase {
		events = append(events, record.Event{RunID: id, At: o.Now, Level: "info",
			Text: fmt.Sprintf("no phase column: static holds found from the current standing still within %g of its largest value", StillFraction)})
	}
	for _, e := range calEvents {
		events = append(events, record.Event{RunID: id, At: o.Now, Level: e.Level, Text: e.Text})
	}
	for _, wn := range warns {
		events = append(events, record.Event{RunID: id, At: o.Now, Level: "warn", Text: wn})
	}
	for _, l := range loops {
		for _, f := range process.Implausible(l) {
			events = append(events, record.Event{RunID: id, At: o.Now, Level: "warn", Text: fmt.Sprintf("loop %d: %s", l.N, f)})
		}
	}
	return &Prepared{Run: run, Loops: loops, Events: events}, nil
}

// Stepper is the processing of one step of an imported recording: the
// calibration records applied to the samples (calrec.Used.Correct), then
// process.Loop with the fixture's and specimen's setup, the records'
// uncertainties among its sources. Import and the re-processing of an
// imported run (package acq/reprocess) both use it.
type Stepper struct {
	setup process.Setup
	cal   *calrec.Used
	evs   []calrec.Event
}

// NewStepper builds the Stepper of a fixture and specimen with the
// calibration records cals, judged for being past due at at; a record that
// cannot apply to fx is an error here, before any step. The warnings are
// the geometry's (process.SetupFrom).
func NewStepper(fx config.Fixture, sp config.Specimen, cals []calrec.Record, at time.Time) (*Stepper, []string, error) {
	setup, warns, err := process.SetupFrom(fx, sp)
	if err != nil {
		return nil, nil, err
	}
	cal, evs, err := calrec.Use(cals, fx, at)
	if err != nil {
		return nil, nil, err
	}
	cal.AddTo(&setup)
	return &Stepper{setup: setup, cal: cal, evs: evs}, warns, nil
}

// Events are the calibration records used: one event each, and a warning
// for one past due.
func (p *Stepper) Events() []calrec.Event { return p.evs }

// Step processes one step's raw samples (not modified).
func (p *Stepper) Step(raw []record.Sample) ([]record.Point, []record.Figure, []record.Correction, error) {
	return process.Loop(p.cal.Correct(raw), p.setup)
}

// Store writes p as a run that goes queued → running → finished at the
// run's queued time, with its events and loops.
func (p *Prepared) Store(ctx context.Context, w record.Writer) error {
	run, at := p.Run, p.Run.Queued
	if err := w.CreateRun(ctx, run); err != nil {
		return fmt.Errorf("record run %s: %w", run.ID, err)
	}
	if err := w.SetState(ctx, run.ID, record.Running, "", at); err != nil {
		return err
	}
	for _, e := range p.Events {
		if err := w.AddEvent(ctx, e); err != nil {
			return err
		}
	}
	for _, l := range p.Loops {
		if err := w.AddLoop(ctx, l); err != nil {
			return fmt.Errorf("loop %d: %w", l.N, err)
		}
	}
	if err := w.SetState(ctx, run.ID, record.Finished, "", at); err != nil {
		return err
	}
	p.Run.State, p.Run.Started, p.Run.Ended = record.Finished, at, at
	return nil
}

// Summary returns a stored loop's figures under the keys of `hystd analyze
// --json` (loopcsv.Summary); the centring offset comes from the loop's
// "centering" correction.
func Summary(l record.Loop) loopcsv.Summary {
	centred, offset := false, 0.0
	for _, c := range l.Corrections {
		if c.Name == "centering" {
			centred, offset = true, c.Size
		}
	}
	return loopcsv.SummaryFrom(func(n string) (float64, float64, bool) {
		for _, f := range l.Figures {
			if f.Name == n {
				return f.Value, f.U, true
			}
		}
		return 0, 0, false
	}, centred, offset)
}
