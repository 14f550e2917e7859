// Package reprocess recomputes a stored run from its raw samples with a
// changed specimen or fixture (a wrong mass or cross-section, a corrected
// search-coil area found after the fact) and stores the result as the run's
// next revision. The earlier revisions stay as they are; the raw samples
// are never changed.
//
// The loops go through the same processing as when the run was recorded:
// a live run's through the live processor (fixture.Offline: the process.Run
// fixture.Opened.Processor builds, with the profiles' accuracies, open
// curves placed from the run's own saturating loops, and the calibration
// records the run used: those its events name, taken from the daemon
// config's calibrations folder and refused unless each is there as the run
// recorded it), an imported run's through the import's (imports.Stepper,
// with the calibration records its config stores). Only the fixture or
// specimen differs; the new revision's events name the records applied.
//
// What changed is written into the revision as "specimen.direct.area_mm2:
// 50 → 100" lines, with who made it; the run gets an event saying so.
package reprocess

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/engine"
	"hystd/acq/fixture"
	"hystd/acq/imports"
	"hystd/acq/process"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/configs"
)

// Store is what re-processing needs of a store.
type Store interface {
	record.Reader
	record.Reviser
	AddEvent(ctx context.Context, e record.Event) error
}

// ErrNoChange is returned when neither the fixture nor the specimen differs
// from the run's latest revision: nothing would be recomputed.
var ErrNoChange = errors.New("nothing changed: give a specimen or fixture that differs from the run's latest revision")

// Options are the inputs of Run.
type Options struct {
	RunID string
	// Fixture and Specimen replace those of the run's latest revision;
	// nil keeps it.
	Fixture  *config.Fixture
	Specimen *config.Specimen
	By       string    // who asks for it, recorded with the revision
	Now      time.Time // when
	// Judge, when set, returns the verdicts of a loop of the new revision
	// against the specimen's grade (nil: none).
	Judge func(sp config.Specimen) func(record.Loop) []record.Verdict
	// Calibrations are the records a live run's calibrations are taken
	// from: those of the daemon config's calibrations folder (named
	// CalibrationsDir in errors). Each record the run used (its events)
	// must be among them as it was recorded, or the run is refused.
	Calibrations    []calrec.Record
	CalibrationsDir string
}

// Result is the stored revision.
type Result struct {
	Run      record.Run
	Revision record.Revision
	Loops    []record.Loop
	Events   []record.Event // added to the run
}

// BadRequest marks errors that are the caller's fault: the API answers 400.
type BadRequest struct{ Err error }

func (e BadRequest) Error() string  { return e.Err.Error() }
func (e BadRequest) Unwrap() error  { return e.Err }
func (BadRequest) BadRequest() bool { return true }
func bad(f string, a ...any) error  { return BadRequest{fmt.Errorf(f, a...)} }
func badErr(err error) error        { return BadRequest{err} }
func isImport(r record.Run) bool    { return r.Recipe == "import" }
func loopInfo(l record.Loop) recipe.LoopInfo {
	return recipe.LoopInfo{Kind: l.Kind, Amplitude: l.Amplitude, AmpUnit: l.AmpUnit, Ramped: l.Ramped}
}

// Run recomputes every loop of run o.RunID from its raw samples with the
// changed fixture or specimen and stores the result as its next revision
// (record.Reviser: all loops at once, or nothing). A loop the processing
// refuses is stored raw only in the new revision, with a warning event, as
// a live run does.
func Run(ctx context.Context, st Store, o Options) (Result, error) {
	run, err := st.Run(ctx, o.RunID)
	if err != nil {
		return Result{}, err
	}
	if !run.State.Ended() {
		return Result{}, bad("run %s is %s: only an ended run can be re-processed", run.ID, run.State)
	}
	revs, err := st.Revisions(ctx, run.ID)
	if err != nil {
		return Result{}, err
	}
	cur := revs[len(revs)-1]
	snap, err := ParseSnapshot(cur.Config)
	if err != nil {
		return Result{}, fmt.Errorf("run %s revision %d: stored config: %w", run.ID, cur.N, err)
	}
	fx, sp := snap.Fixture, snap.Specimen
	if o.Fixture != nil {
		fx = *o.Fixture
	}
	if o.Specimen != nil {
		sp = *o.Specimen
	}
	change := append(Diff("fixture", snap.Fixture, fx), Diff("specimen", snap.Specimen, sp)...)
	if len(change) == 0 {
		return Result{}, badErr(ErrNoChange)
	}
	n := cur.N + 1
	prefix := fmt.Sprintf("revision %d: ", n)
	var events []record.Event
	event := func(level, text string) {
		events = append(events, record.Event{RunID: run.ID, At: o.Now, Level: level, Text: prefix + text})
	}
	by := o.By
	if by == "" {
		by = "unknown"
	}
	event("info", fmt.Sprintf("re-processed from the raw samples by %s; changed %s", by, strings.Join(change, "; ")))

	var cals []calrec.Record
	if !isImport(run) {
		// A live run's calibration records: those its events name, from
		// the daemon config's folder, as recorded (recorded).
		evs, err := st.Events(ctx, run.ID)
		if err != nil {
			return Result{}, err
		}
		if cals, err = recorded(run.ID, evs, o.Calibrations, o.CalibrationsDir); err != nil {
			return Result{}, err
		}
	}
	step, warns, err := processor(run, fx, sp, snap, cals)
	if err != nil {
		return Result{}, badErr(err)
	}
	for _, w := range warns {
		event("warn", w)
	}
	var judge func(record.Loop) []record.Verdict
	if o.Judge != nil {
		judge = o.Judge(sp)
	}
	loops, err := reprocessLoops(ctx, st, run.ID, cur.N, n, step, judge, event)
	if err != nil {
		return Result{}, err
	}
	cfg := snap.With(fx, sp)
	sum := sha256.Sum256([]byte(cfg))
	v := record.Revision{RunID: run.ID, N: n, At: o.Now, By: by, Change: strings.Join(change, "\n"),
		Fixture: fx.Name, Specimen: sp.ID, Material: sp.Material, Grade: sp.Grade,
		Config: cfg, ConfigHash: hex.EncodeToString(sum[:])}
	if err := st.AddRevision(ctx, v, loops); err != nil {
		return Result{}, err
	}
	for _, e := range events {
		if err := st.AddEvent(ctx, e); err != nil {
			return Result{}, fmt.Errorf("revision %d stored, but its event was not: %w", n, err)
		}
	}
	run.Revision = n
	return Result{Run: run, Revision: v, Loops: loops, Events: events}, nil
}

// reprocessLoops recomputes with step every loop of revision cur of run
// runID from its raw samples as loops of revision n, judged by judge when
// not nil; event records what the run is told.
func reprocessLoops(ctx context.Context, st Store, runID string, cur, n int, step stepFunc,
	judge func(record.Loop) []record.Verdict, event func(level, text string)) ([]record.Loop, error) {
	prev, err := st.LoopsOf(ctx, runID, cur)
	if err != nil {
		return nil, err
	}
	var loops []record.Loop
	calSeen := map[string]bool{}
	for _, pl := range prev {
		full, err := st.LoopOf(ctx, runID, pl.N, cur)
		if err != nil {
			return nil, err
		}
		l := record.Loop{RunID: runID, N: pl.N, Revision: n, Kind: pl.Kind, Amplitude: pl.Amplitude,
			AmpUnit: pl.AmpUnit, Started: pl.Started, Ramped: pl.Ramped}
		pr, cals, err := step(full.Raw, loopInfo(pl))
		for _, c := range cals {
			if !calSeen[c.Text] {
				calSeen[c.Text] = true
				event(c.Level, c.Text)
			}
		}
		if err != nil {
			event("warn", fmt.Sprintf("loop %d stored raw only: processing failed: %v", l.N, err))
		} else {
			l.Points, l.Figures, l.Corrections = pr.Points, pr.Figures, pr.Corrections
			// What the engine found while driving the loop (the amplitude of
			// a peak-aimed loop) is a fact of the recording: kept.
			for _, f := range pl.Figures {
				if d, ok := loop.DefOf(f.Name); ok && d.From == loop.FromAim {
					l.Figures = append(l.Figures, f)
				}
			}
			for _, f := range process.Implausible(l) {
				event("warn", fmt.Sprintf("loop %d: %s", l.N, f))
			}
			if judge != nil {
				l.Verdicts = judge(l)
			}
		}
		loops = append(loops, l)
	}
	return loops, nil
}

// stepFunc processes one loop's raw samples; the events are calibration
// records used.
type stepFunc func(raw []record.Sample, li recipe.LoopInfo) (engine.Processed, []calrec.Event, error)

// processor is the processing the run was recorded with, on fx and sp; a
// live run's with cals, the calibration records it used (recorded),
// applied as when it ran (calrec.Use, judged past due at its start).
func processor(run record.Run, fx config.Fixture, sp config.Specimen, snap Snapshot, cals []calrec.Record) (stepFunc, []string, error) {
	if isImport(run) {
		s, warns, err := imports.NewStepper(fx, sp, snap.Calibrations, run.Queued)
		if err != nil {
			return nil, nil, err
		}
		evs := s.Events()
		return func(raw []record.Sample, _ recipe.LoopInfo) (engine.Processed, []calrec.Event, error) {
			pts, figs, corr, err := s.Step(raw)
			return engine.Processed{Points: pts, Figures: figs, Corrections: corr}, evs, err
		}, warns, nil
	}
	if len(snap.Calibrations) > 0 {
		return nil, nil, errors.New("the run's stored config names calibration records, which a live run's never does")
	}
	used, evs, err := calrec.Use(cals, fx, ranAt(run))
	if err != nil {
		return nil, nil, err
	}
	p, warns, err := fixture.Offline(fx, sp, used)
	if err != nil {
		return nil, nil, err
	}
	return func(raw []record.Sample, li recipe.LoopInfo) (engine.Processed, []calrec.Event, error) {
		pr, err := p(raw, li)
		return pr, evs, err
	}, warns, nil
}

// Snapshot is a run revision's stored config (record.Run.Config): the
// fixture and specimen it was processed with, the calibration records an
// import applied, and the rest (the recipe, the provenance line) as text.
type Snapshot struct {
	Fixture      config.Fixture
	Specimen     config.Specimen
	Calibrations []calrec.Record
	head         string   // text before the fixture (an import's provenance line)
	rest         []string // the other documents, as stored
}

// ParseSnapshot reads the documents a live run (engine: "# fixture",
// "# specimen", "# recipe …") or an import ("# imported from …" before the
// fixture, "# calibration …" documents) stores as its config.
func ParseSnapshot(cfg string) (Snapshot, error) {
	var s Snapshot
	var haveFx, haveSp bool
	for i, part := range strings.Split(cfg, "\n---\n") {
		p := strings.TrimPrefix(part, "---\n")
		if i == 0 {
			if k := strings.Index(p, "# fixture\n"); k > 0 {
				s.head, p = p[:k], p[k:]
			}
		}
		switch {
		case strings.HasPrefix(p, "# fixture\n"):
			if err := yaml.Unmarshal([]byte(p), &s.Fixture); err != nil {
				return Snapshot{}, fmt.Errorf("fixture: %w", err)
			}
			haveFx = true
		case strings.HasPrefix(p, "# specimen\n"):
			if err := yaml.Unmarshal([]byte(p), &s.Specimen); err != nil {
				return Snapshot{}, fmt.Errorf("specimen: %w", err)
			}
			haveSp = true
		case strings.HasPrefix(p, "# calibration "):
			doc, err := configs.Parse("stored calibration", []byte(p))
			if err != nil {
				return Snapshot{}, err
			}
			c, err := calrec.FromDoc(doc)
			if err != nil {
				return Snapshot{}, err
			}
			s.Calibrations = append(s.Calibrations, c)
			s.rest = append(s.rest, p)
		default:
			s.rest = append(s.rest, p)
		}
	}
	if !haveFx || !haveSp {
		return Snapshot{}, errors.New("no fixture and specimen documents")
	}
	return s, nil
}

// With is the snapshot's text with fx and sp in place of its own.
func (s Snapshot) With(fx config.Fixture, sp config.Specimen) string {
	var b bytes.Buffer
	b.WriteString(s.head)
	b.WriteString("# fixture\n")
	if y, err := yaml.Marshal(fx); err == nil {
		b.Write(y)
	}
	b.WriteString("---\n# specimen\n")
	if y, err := yaml.Marshal(sp); err == nil {
		b.Write(y)
	}
	for _, r := range s.rest {
		b.WriteString("---\n")
		b.WriteString(r)
		if !strings.HasSuffix(r, "\n") {
			b.WriteString("\n")
		}
	}
	return b.String()
}

// Diff lists the fields in which b differs from a, as "what.key.sub: old →
// new" (YAML keys; "(none)" for a field one side lacks), sorted.
func Diff(what string, a, b any) []string {
	fa, fb := flatten(a), flatten(b)
	keys := map[string]bool{}
	for k := range fa {
		keys[k] = true
	}
	for k := range fb {
		keys[k] = true
	}
	var out []string
	for k := range keys {
		va, oka := fa[k]
		vb, okb := fb[k]
		if oka && okb && va == vb {
			continue
		}
		if !oka {
			va = "(none)"
		}
		if !okb {
			vb = "(none)"
		}
		out = append(out, fmt.Sprintf("%s.%s: %s → %s", what, k, va, vb))
	}
	sort.Strings(out)
	return out
}

// flatten maps each leaf of v's YAML form to its text.
func flatten(v any) map[string]string {
	out := map[string]string{}
	y, err := yaml.Marshal(v)
	if err != nil {
		return out
	}
	var m any
	if err := yaml.Unmarshal(y, &m); err != nil {
		return out
	}
	var walk func(prefix string, x any)
	walk = func(prefix string, x any) {
		switch t := x.(type) {
		case map[string]any:
			for k, e := range t {
				p := k
				if prefix != "" {
					p = prefix + "." + k
				}
				walk(p, e)
			}
		case []any:
			for i, e := range t {
				walk(fmt.Sprintf("%s[%d]", prefix, i), e)
			}
		case float64:
			out[prefix] = fmt.Sprint(t)
			if math.IsNaN(t) {
				out[prefix] = "NaN"
			}
		default:
			out[prefix] = fmt.Sprint(t)
		}
	}
	walk("", m)
	return out
}

// ParseChange reads the YAML documents of a re-process request (the API's
// body): at most one `kind: specimen` and one `kind: fixture`, separated by
// "---" lines. Errors name the request and the document's line.
func ParseChange(name string, body []byte) (*config.Fixture, *config.Specimen, error) {
	var fx *config.Fixture
	var sp *config.Specimen
	for _, part := range splitDocs(string(body)) {
		text := part.text
		if strings.TrimSpace(text) == "" {
			continue
		}
		// Pad with blank lines so that errors give the line in the body.
		padded := []byte(strings.Repeat("\n", part.line-1) + text)
		doc, err := configs.Parse(name, padded)
		if err != nil {
			return nil, nil, badErr(err)
		}
		switch k := doc.Kind(); k {
		case "specimen":
			if sp != nil {
				return nil, nil, bad("%s:%d: a second specimen document", name, part.line)
			}
			s, err := config.SpecimenFrom(doc)
			if err != nil {
				return nil, nil, badErr(err)
			}
			sp = &s
		case "fixture":
			if fx != nil {
				return nil, nil, bad("%s:%d: a second fixture document", name, part.line)
			}
			f, err := config.FixtureFrom(doc)
			if err != nil {
				return nil, nil, badErr(err)
			}
			fx = &f
		default:
			return nil, nil, bad("%s:%d: kind %q: want a specimen or a fixture document", name, part.line, k)
		}
	}
	if fx == nil && sp == nil {
		return nil, nil, bad("%s: no specimen or fixture document", name)
	}
	return fx, sp, nil
}

type docPart struct {
	text string
	line int // 1-based line of its first line in the whole text
}

// splitDocs cuts YAML text at lines that are exactly "---".
func splitDocs(s string) []docPart {
	var out []docPart
	lines := strings.SplitAfter(s, "\n")
	start, cur := 1, strings.Builder{}
	for i, l := range lines {
		if strings.TrimRight(l, "\r\n") == "---" {
			out = append(out, docPart{cur.String(), start})
			cur.Reset()
			start = i + 2
			continue
		}
		cur.WriteString(l)
	}
	return append(out, docPart{cur.String(), start})
}
