package daemon

import (
	"context"
	"errors"

	"hystd/acq/config"
	"hystd/acq/record"
	"hystd/acq/reprocess"
)

// Reprocess re-processes stored run id with the specimen and/or fixture of
// body (YAML documents, reprocess.ParseChange) and stores the result as
// the run's next revision, recorded as made by by (package acq/reprocess).
// Its loops are judged against the new specimen's grade; a live run's
// calibration records are taken from the config's calibrations folder. It
// runs no instrument.
func (d *Daemon) Reprocess(ctx context.Context, id string, body []byte, by string) (record.Revision, []record.Loop, error) {
	st, ok := d.deps.Writer.(reprocess.Store)
	if !ok {
		return record.Revision{}, nil, errors.New("this daemon's store keeps no revisions")
	}
	fx, sp, err := reprocess.ParseChange("request body", body)
	if err != nil {
		return record.Revision{}, nil, err
	}
	cfg := d.cfg.Load()
	res, err := reprocess.Run(ctx, st, reprocess.Options{RunID: id, Fixture: fx, Specimen: sp, By: by,
		Now: d.deps.Clock.Now(), Judge: Judge(cfg), Calibrations: cfg.Calibrations, CalibrationsDir: cfg.Config.Calibrations})
	if err != nil {
		return record.Revision{}, nil, err
	}
	d.log.Info("run re-processed", "run", id, "revision", res.Revision.N, "by", by, "change", res.Revision.Change)
	return res.Revision, res.Loops, nil
}

// Judge returns, for a specimen, the judging of a loop against its grade
// in cfg's registry (nil when it has none), for reprocess.Options.Judge.
func Judge(cfg *Loaded) func(sp config.Specimen) func(record.Loop) []record.Verdict {
	return func(sp config.Specimen) func(record.Loop) []record.Verdict {
		gr, _ := cfg.Registry.GradeOf(sp)
		if gr == nil {
			return nil
		}
		return func(l record.Loop) []record.Verdict { return gr.Judge(l, cfg.Registry.Rule) }
	}
}
