package daemon

import (
	"context"
	"fmt"

	"hystd/acq/api"
	"hystd/acq/calrec"
	"hystd/acq/imports"
	"hystd/acq/record"
)

// Import stores a raw recording (package acq/imports) as a run of one of
// the config's fixtures on a specimen of its registry (or a specimen file),
// processed like a live run's loops; name is the recording's file name for
// the provenance. A bad file or an unknown fixture or specimen stores
// nothing. It runs no instrument, so it needs no free fixture. Loops are
// judged against the specimen's grade as a live run's are.
func (d *Daemon) Import(ctx context.Context, fixture, specimen, name string, data []byte) (record.Run, []record.Loop, error) {
	cfg := d.cfg.Load()
	lf, ok := cfg.Fixture(fixture)
	if !ok {
		return record.Run{}, nil, fmt.Errorf("%w %q", ErrUnknownFixture, fixture)
	}
	sp, err := cfg.Registry.Specimen(specimen)
	if err != nil {
		return record.Run{}, nil, err
	}
	now := d.deps.Clock.Now()
	operator := "api"
	u, byUser := api.UserFrom(ctx)
	if byUser {
		operator = u.Name
	}
	p, err := imports.Prepare(imports.Options{File: name, Data: data, Fixture: lf.Fixture, Specimen: sp,
		Software: d.deps.Software, Operator: operator, Now: now, Calibrations: calrec.Select(cfg.Calibrations, lf.Name, nil)})
	if err != nil {
		return record.Run{}, nil, importError{err}
	}
	if byUser {
		p.Events = append(p.Events, record.Event{RunID: p.Run.ID, At: now, Level: "info", Text: api.ActionText(u, "recording imported")})
	}
	gr, _ := cfg.Registry.GradeOf(sp)
	if err := p.Store(ctx, gradeWriter(d.deps.Writer, gr, cfg)); err != nil {
		return record.Run{}, nil, err
	}
	d.log.Info("recording imported", "run", p.Run.ID, "file", name, "loops", len(p.Loops))
	return p.Run, p.Loops, nil
}

// importError is a recording or a fixture–specimen pairing that cannot be
// processed: the client's fault (the API answers 400).
type importError struct{ err error }

func (e importError) Error() string    { return e.err.Error() }
func (e importError) Unwrap() error    { return e.err }
func (e importError) BadRequest() bool { return true }
