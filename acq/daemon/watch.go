package daemon

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"time"

	"go.yaml.in/yaml/v3"

	"hystd/acq/grade"
	"hystd/acq/record"
	"hystd/configs"
)

// Subfolders of a watched folder.
const (
	ActiveDir = "active" // files queued or running
	DoneDir   = "done"   // files whose run finished
	FailedDir = "failed" // refused files and runs that aborted or failed
)

// Result is the file written beside a recipe moved to done/ or failed/
// (NAME.result.yaml).
type Result struct {
	Kind    string `yaml:"kind"` // "run-result"
	Recipe  string `yaml:"recipe_file"`
	Fixture string `yaml:"fixture"`
	RunID   string `yaml:"run_id,omitempty"`
	State   string `yaml:"state"` // refused, finished, aborted, failed, interrupted
	Reason  string `yaml:"reason,omitempty"`
	Queued  string `yaml:"queued,omitempty"`
	Started string `yaml:"started,omitempty"`
	Ended   string `yaml:"ended,omitempty"`
	// Specimen and Grade are the run's; Loops its stored loops with their
	// figures (U expanded, k = 2) and verdicts.
	Specimen string       `yaml:"specimen,omitempty"`
	Grade    string       `yaml:"grade,omitempty"`
	Verdict  string       `yaml:"verdict,omitempty"` // worst over all loops: fail, undecided, pass
	Loops    []ResultLoop `yaml:"loops,omitempty"`
}

// ResultLoop is one stored loop in a result file.
type ResultLoop struct {
	N         int             `yaml:"n"`
	Kind      string          `yaml:"kind"`
	Amplitude float64         `yaml:"amplitude"`
	AmpUnit   string          `yaml:"amplitude_unit"`
	Figures   []ResultFigure  `yaml:"figures"`
	Verdicts  []ResultVerdict `yaml:"verdicts,omitempty"`
}

// ResultFigure is one figure: value and expanded uncertainty (k = 2) in unit; U is .nan when not evaluated.
type ResultFigure struct {
	Name  string  `yaml:"name"`
	Value float64 `yaml:"value"`
	U     float64 `yaml:"u"`
	Unit  string  `yaml:"unit"`
}

// ResultVerdict is one figure judged against a grade's limit.
type ResultVerdict struct {
	Figure  string `yaml:"figure"`
	Outcome string `yaml:"outcome"`
	Limit   string `yaml:"limit"`
	Grade   string `yaml:"grade"`
	Rule    string `yaml:"rule"`
	Note    string `yaml:"note,omitempty"`
}

// watcher polls one folder for new recipe files (*.yaml, *.yml). A file is
// taken once its size and modification time stayed the same over one poll
// (so a file being copied in is not read half-written), moved to active/,
// submitted, and moved on to done/ or failed/ when its run ends.
//
// Only regular files of at most configs.MaxFileSize (1 MiB) are taken. A symlink,
// FIFO, device, socket or larger file is moved to failed/ unopened, with a
// result file that says why and nothing of its content; the file taken is
// opened with O_NOFOLLOW|O_NONBLOCK and checked again with fstat, so a file
// swapped for a FIFO or a link between the listing and the open cannot block
// the watcher (nor, through it, SIGTERM) or be followed out of the folder.
type watcher struct {
	d       *Daemon
	fixture string
	dir     string
	poll    time.Duration
	log     *slog.Logger
	seen    map[string]fileSig
}

type fileSig struct {
	size int64
	mod  time.Time
}

func (w *watcher) run(ctx context.Context) {
	w.seen = map[string]fileSig{}
	for _, sub := range []string{"", ActiveDir, DoneDir, FailedDir} {
		if err := os.MkdirAll(filepath.Join(w.dir, sub), 0o755); err != nil {
			w.log.Error("watched folder unusable", "err", err)
			return
		}
	}
	w.recover()
	t := time.NewTicker(w.poll)
	defer t.Stop()
	for {
		w.scan(ctx)
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
	}
}

// recover moves files left in active/ by a daemon that was killed to failed/.
func (w *watcher) recover() {
	ents, _ := os.ReadDir(filepath.Join(w.dir, ActiveDir))
	for _, e := range ents {
		if e.IsDir() || !isRecipe(e.Name()) {
			continue
		}
		src := filepath.Join(w.dir, ActiveDir, e.Name())
		w.finish(src, Result{State: "interrupted", Reason: "the daemon stopped while this recipe was queued or running; its run record says how far it got"})
	}
}

func isRecipe(name string) bool {
	return !strings.HasPrefix(name, ".") && (strings.HasSuffix(name, ".yaml") || strings.HasSuffix(name, ".yml")) &&
		!strings.HasSuffix(name, ".result.yaml")
}

func (w *watcher) scan(ctx context.Context) {
	ents, err := os.ReadDir(w.dir)
	if err != nil {
		w.log.Error("cannot read watched folder", "err", err)
		return
	}
	now := map[string]fileSig{}
	for _, e := range ents {
		if e.IsDir() || !isRecipe(e.Name()) {
			continue
		}
		fi, err := e.Info() // lstat: a symlink is seen as a symlink
		if err != nil {
			continue
		}
		if why := configs.NotRegular(fi.Mode(), fi.Size()); why != "" {
			w.reject(e.Name(), why)
			continue
		}
		sig := fileSig{fi.Size(), fi.ModTime()}
		now[e.Name()] = sig
		if prev, ok := w.seen[e.Name()]; !ok || prev != sig {
			continue // new or still changing: look again next poll
		}
		w.take(ctx, e.Name())
		delete(now, e.Name())
	}
	w.seen = now
}

func (w *watcher) take(ctx context.Context, name string) {
	src := filepath.Join(w.dir, name)
	act := unique(filepath.Join(w.dir, ActiveDir, name))
	if err := os.Rename(src, act); err != nil {
		w.log.Error("cannot move recipe file to active/", "file", name, "err", err)
		return
	}
	data, err := configs.ReadFileNoFollow(act)
	if err != nil {
		w.d.metrics.files.WithLabelValues(w.fixture, "refused").Inc()
		w.log.Warn("recipe file refused", "file", name, "err", err)
		w.finish(act, Result{State: "refused", Reason: err.Error()})
		return
	}
	id, err := w.d.SubmitNamed(ctx, w.fixture, src, data, "watch", func(run record.Run, err error) {
		w.finish(act, resultOf(run, err))
	})
	if err != nil {
		w.d.metrics.files.WithLabelValues(w.fixture, "refused").Inc()
		w.log.Warn("recipe file refused", "file", name, "err", err)
		w.finish(act, Result{State: "refused", Reason: err.Error()})
		return
	}
	w.d.metrics.files.WithLabelValues(w.fixture, "queued").Inc()
	w.log.Info("recipe file queued", "file", name, "run", id)
}

// reject moves a file the folder does not take to failed/, unopened, with a
// result file giving the reason.
func (w *watcher) reject(name, why string) {
	w.d.metrics.files.WithLabelValues(w.fixture, "refused").Inc()
	w.log.Warn("file in the watched folder refused", "file", name, "reason", why)
	w.finish(filepath.Join(w.dir, name), Result{State: "refused", Reason: why})
}

func resultOf(run record.Run, err error) Result {
	r := Result{RunID: run.ID, State: string(run.State), Reason: run.Reason}
	if r.State == "" {
		r.State = string(record.Failed)
	}
	if r.Reason == "" && err != nil {
		r.Reason = err.Error()
	}
	ts := func(t time.Time) string {
		if t.IsZero() {
			return ""
		}
		return t.UTC().Format(time.RFC3339Nano)
	}
	r.Queued, r.Started, r.Ended = ts(run.Queued), ts(run.Started), ts(run.Ended)
	return r
}

// finish moves a file from active/ to done/ (finished) or failed/ and writes
// its result file beside it.
func (w *watcher) finish(act string, r Result) {
	sub := FailedDir
	if r.State == string(record.Finished) {
		sub = DoneDir
	}
	dst := unique(filepath.Join(w.dir, sub, filepath.Base(act)))
	if err := os.Rename(act, dst); err != nil {
		w.log.Error("cannot move recipe file", "from", act, "to", dst, "err", err)
		dst = act
	}
	r.Kind, r.Recipe, r.Fixture = "run-result", filepath.Base(dst), w.fixture
	w.addLoops(&r)
	out, _ := yaml.Marshal(r)
	res := strings.TrimSuffix(strings.TrimSuffix(dst, ".yaml"), ".yml") + ".result.yaml"
	if err := writeFileSync(res, out); err != nil {
		w.log.Error("cannot write result file", "file", res, "err", err)
	}
	outcome := sub
	if r.State == "refused" {
		outcome = "refused"
	}
	if outcome != "refused" {
		w.d.metrics.files.WithLabelValues(w.fixture, outcome).Inc()
	}
}

// unique returns path, or path with a number before its extension when a
// file of that name exists.
func unique(path string) string {
	if _, err := os.Lstat(path); os.IsNotExist(err) {
		return path
	}
	ext := filepath.Ext(path)
	base := strings.TrimSuffix(path, ext)
	for i := 2; ; i++ {
		p := fmt.Sprintf("%s.%d%s", base, i, ext)
		if _, err := os.Lstat(p); os.IsNotExist(err) {
			return p
		}
	}
}

// writeFileSync writes data to path through a temporary file, synced, then
// renamed. The temporary file is created afresh without following links, so
// a link planted under its name cannot redirect the write.
func writeFileSync(path string, data []byte) error {
	tmp := path + ".tmp"
	if err := os.Remove(tmp); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	f, err := os.OpenFile(tmp, os.O_WRONLY|os.O_CREATE|os.O_EXCL|syscall.O_NOFOLLOW, 0o644)
	if err != nil {
		return err
	}
	if _, err := f.Write(data); err != nil {
		f.Close()
		return err
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	return os.Rename(tmp, path)
}

// addLoops fills a result's specimen, grade, loops, figures and verdicts
// from the store, when the daemon's writer can read back (the SQLite store does).
func (w *watcher) addLoops(r *Result) {
	rd, ok := w.d.deps.Writer.(interface {
		Run(ctx context.Context, id string) (record.Run, error)
		Loops(ctx context.Context, runID string) ([]record.Loop, error)
	})
	if !ok || r.RunID == "" {
		return
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if run, err := rd.Run(ctx, r.RunID); err == nil {
		r.Specimen, r.Grade = run.Specimen, run.Grade
	}
	loops, err := rd.Loops(ctx, r.RunID)
	if err != nil {
		w.log.Warn("result file without figures", "run", r.RunID, "err", err)
		return
	}
	var all []record.Verdict
	for _, l := range loops {
		rl := ResultLoop{N: l.N, Kind: l.Kind, Amplitude: l.Amplitude, AmpUnit: l.AmpUnit}
		for _, f := range l.Figures {
			rl.Figures = append(rl.Figures, ResultFigure{Name: f.Name, Value: f.Value, U: f.U, Unit: f.Unit})
		}
		for _, v := range l.Verdicts {
			rl.Verdicts = append(rl.Verdicts, ResultVerdict{Figure: v.Figure, Outcome: string(v.Outcome),
				Limit: grade.Bounds(v) + " " + v.Unit, Grade: v.Grade, Rule: v.Rule, Note: v.Note})
		}
		all = append(all, l.Verdicts...)
		r.Loops = append(r.Loops, rl)
	}
	r.Verdict = string(record.Worst(all))
}
