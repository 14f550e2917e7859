package daemon

import (
	"context"
	"fmt"
	"path/filepath"
	"sort"

	"hystd/acq/api"
	"hystd/acq/grade"
	"hystd/acq/recipe"
	"hystd/acq/record"
)

// ErrNotWaiting is returned by ConfirmMount for a run that is not waiting for its specimen.
var ErrNotWaiting = api.ErrNotWaiting

// SubmitFor is Submit on a chosen specimen: an id of the config's specimen
// registry or a specimen file ("" takes the recipe's specimen: key, else the
// fixture's mounted specimen).
func (d *Daemon) SubmitFor(ctx context.Context, fixture, specimen string, recipeYAML []byte) (string, error) {
	return d.submit(ctx, fixture, specimen, "submitted recipe", recipeYAML, "api", nil)
}

// SubmitForNamed is SubmitNamed on a chosen specimen (see SubmitFor).
func (d *Daemon) SubmitForNamed(ctx context.Context, fixture, specimen, name string, data []byte, source string, done func(record.Run, error)) (string, error) {
	return d.submit(ctx, fixture, specimen, name, data, source, done)
}

// chooseSpecimen returns lf with the specimen a submission runs on — the
// explicit choice, else the recipe's specimen: key (relative files taken
// from the recipe's folder), else the mounted one — with its geometry, and
// the grade its loops are judged against.
func (d *Daemon) chooseSpecimen(cfg *Loaded, lf LoadedFixture, specimen string, r *recipe.Recipe) (LoadedFixture, *grade.Grade, error) {
	ref := specimen
	if ref == "" && r.Specimen != "" {
		ref = r.Specimen
		if _, known := cfg.Registry.Specimens[ref]; !known && !filepath.IsAbs(ref) && r.File() != "" {
			ref = filepath.Join(filepath.Dir(r.File()), ref)
		}
	}
	if ref != "" {
		sp, err := cfg.Registry.Specimen(ref)
		if err != nil {
			if specimen == "" {
				return lf, nil, r.Errorf("specimen", "%v", err)
			}
			return lf, nil, err
		}
		lf.Specimen = sp
		g, err := recipe.GeometryOf(lf.Fixture, sp)
		switch {
		case err == nil:
			lf.Geometry = g
		case lf.Fixture.HFrom == "current":
			return lf, nil, fmt.Errorf("specimen %s on fixture %s: %w", sp.ID, lf.Name, err)
		}
	}
	gr, note := cfg.Registry.GradeOf(lf.Specimen)
	if note != "" {
		d.log.Warn(note, "fixture", lf.Name)
	}
	return lf, gr, nil
}

func gradeWriter(w record.Writer, gr *grade.Grade, cfg *Loaded) record.Writer {
	if gr == nil {
		return w
	}
	return grade.Writer{Writer: w, Grade: gr, Rule: cfg.Registry.Rule}
}

// awaitMount holds a run whose specimen is not the one on the fixture until
// ConfirmMount, when the config asks for confirmation; otherwise it records
// the run's specimen as mounted at once. The error is ctx's when the wait
// was ended (abort, stop).
func (d *Daemon) awaitMount(ctx context.Context, fr *fixtureRunner, j *job) error {
	cfg := d.cfg.Load()
	d.mu.Lock()
	if !cfg.Config.ConfirmMount || fr.mounted == j.sp.ID {
		fr.mounted = j.sp.ID
		d.mu.Unlock()
		return nil
	}
	was := fr.mounted
	ch := make(chan struct{})
	j.mount = ch
	d.mu.Unlock()
	msg := fmt.Sprintf("waiting for specimen %s to be mounted on fixture %s (in place of %s); confirm with POST /api/v1/runs/%s/mount or on the review page",
		j.sp.ID, fr.name, was, j.id)
	d.log.Info(msg, "run", j.id)
	_ = d.deps.Writer.AddEvent(ctx, record.Event{RunID: j.id, At: d.deps.Clock.Now(), Level: "info", Text: msg})
	select {
	case <-ch:
		d.mu.Lock()
		fr.mounted, j.mount = j.sp.ID, nil
		d.mu.Unlock()
		_ = d.deps.Writer.AddEvent(ctx, record.Event{RunID: j.id, At: d.deps.Clock.Now(), Level: "info",
			Text: fmt.Sprintf("specimen %s confirmed mounted", j.sp.ID)})
		return nil
	case <-ctx.Done():
		d.mu.Lock()
		j.mount = nil
		d.mu.Unlock()
		return context.Cause(ctx)
	}
}

// ConfirmMount tells the daemon that the specimen run runID waits for is
// now mounted on its fixture; the run then starts.
func (d *Daemon) ConfirmMount(ctx context.Context, runID string) error {
	d.mu.Lock()
	j := d.runs[runID]
	if j == nil || j.mount == nil {
		d.mu.Unlock()
		return fmt.Errorf("run %s: %w", runID, ErrNotWaiting)
	}
	close(j.mount)
	j.mount = nil
	d.mu.Unlock()
	d.recordAction(ctx, runID, "specimen "+j.sp.ID+" mount confirmed")
	return nil
}

// MountWait is a run waiting for its specimen to be mounted.
type MountWait = api.MountWait

// Waiting lists the runs waiting for a specimen to be mounted.
func (d *Daemon) Waiting() []MountWait {
	d.mu.Lock()
	defer d.mu.Unlock()
	var out []MountWait
	for _, j := range d.runs {
		if j.mount != nil {
			mw := MountWait{RunID: j.id, Fixture: j.fixture, Specimen: j.sp.ID}
			if fr := d.fixtures[j.fixture]; fr != nil {
				mw.Mounted = fr.mounted
			}
			out = append(out, mw)
		}
	}
	sort.Slice(out, func(a, b int) bool { return out[a].RunID < out[b].RunID })
	return out
}

// SpecimenIDs lists the ids of the specimen registry in force.
func (d *Daemon) SpecimenIDs() []string { return d.cfg.Load().Registry.IDs() }
