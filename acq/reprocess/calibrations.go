package reprocess

import (
	"strings"
	"time"

	"hystd/acq/calrec"
	"hystd/acq/record"
)

// recorded returns the calibration records live run id used, as its events
// name them ("used calibration …", calrec.UsedPrefix, written when its
// instruments had opened), taken from recs: the records of the daemon
// config's calibrations folder (dir names it in errors). A live run's
// config snapshot is written before the instruments open and holds no
// record, so the folder is where their values are found; each must be there
// under its id and describe itself exactly as the run recorded it (target
// and identity, certificate, date, due: calrec.Record.Describe), or the run
// is refused naming the record: re-processing without it, or with another,
// would silently give other figures.
//
// The run records no calibrated value: a record edited in place under the
// same id, certificate and dates is not told apart (a renewed calibration
// is a new record, with its own id).
func recorded(id string, evs []record.Event, recs []calrec.Record, dir string) ([]calrec.Record, error) {
	byID := map[string]calrec.Record{}
	for _, r := range recs {
		byID[r.ID] = r
	}
	missing := "which the calibrations folder " + dir + " does not hold"
	if dir == "" {
		missing = "but no calibrations folder was given to take it from (the daemon config's calibrations; hystd reprocess --config)"
	}
	var out []calrec.Record
	seen := map[string]bool{}
	for _, e := range evs {
		rest, ok := strings.CutPrefix(e.Text, calrec.UsedPrefix)
		if !ok {
			continue
		}
		rid, _, _ := strings.Cut(rest, " ")
		if seen[rid] {
			continue
		}
		seen[rid] = true
		want := "calibration " + rest
		r, ok := byID[rid]
		if !ok {
			return nil, bad("run %s used %s, %s: re-processing without it would drop its correction; nothing was changed", id, want, missing)
		}
		if got := r.Describe(); got != want {
			return nil, bad("run %s used %s, but %s now holds %s: the record differs from the one the run used; nothing was changed", id, want, r.File, got)
		}
		out = append(out, r)
	}
	return out, nil
}

// ranAt is when a live run's calibrations were judged past due or not: its
// start (its queueing when it never started).
func ranAt(run record.Run) time.Time {
	if run.Started.IsZero() {
		return run.Queued
	}
	return run.Started
}
