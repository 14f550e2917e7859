package influx

import (
	"errors"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"time"

	"github.com/influxdata/influxdb-client-go/v2/api/write"
	lp "github.com/influxdata/line-protocol"

	"hystd/acq/record"
)

// Measurement names.
const (
	// SampleMeasurement holds one point per sample of a loop with the
	// fields H (A/m), B (T), J (T), I (A), psi (Wb-turns), V (V),
	// setpoint, b_probe (T), temp (°C) and t (s since the run started).
	SampleMeasurement = "hyst_sample"
	// FigureMeasurement holds one point per loop with one field per figure
	// (its SI value) and NAME_u (its expanded uncertainty, k = 2).
	FigureMeasurement = "hyst_figure"
)

// Branch tag values of the sample measurement.
const (
	BranchRising  = "rising"  // corrected point, H increasing
	BranchFalling = "falling" // corrected point, H decreasing
	BranchInitial = "initial" // corrected point on the initial curve, or branch unknown
	BranchPre     = "hold-pre"
	BranchPost    = "hold-post"
)

// ErrNoStart is returned for a run without a start time: without it the
// points would have no deterministic timestamp.
var ErrNoStart = errors.New("run has no start time")

// Base returns the time all of a run's timestamps count from: the run's
// start.
func Base(r record.Run) (time.Time, error) {
	if r.Started.IsZero() {
		return time.Time{}, fmt.Errorf("run %s: %w", r.ID, ErrNoStart)
	}
	return r.Started, nil
}

// Points builds the points of one loop in a fixed order: the samples (one
// point per raw sample, joined with the corrected point of the same T), then
// one figure point. The result depends only on r and l, so sending it again
// overwrites the same points instead of adding new ones.
//
// Timestamps: run start + sample T, nanosecond precision. Because some
// servers keep milliseconds only, a sample whose millisecond is not after the
// previous sample's is moved to the start of the next free millisecond; its
// exact time stays in the t field. The figure point is stamped with the
// loop's start (or the first sample's time) and is a series of its own.
//
// NaN and ±Inf values have no line-protocol form and are left out; a sample
// with no finite value at all is left out too.
func Points(r record.Run, l record.Loop) ([]*write.Point, error) {
	base, err := Base(r)
	if err != nil {
		return nil, err
	}
	tags := map[string]string{}
	put := func(k, v string) {
		if v != "" {
			tags[k] = v
		}
	}
	put("fixture", r.Fixture)
	put("specimen", r.Specimen)
	put("material", r.Material)
	put("run", r.ID)
	put("loop", strconv.Itoa(l.N))

	rows := joinSamples(l)
	out := make([]*write.Point, 0, len(rows)+1)
	var lastMs int64 = math.MinInt64
	for _, row := range rows {
		fields := make(map[string]any, 10)
		addf := func(k string, v float64) {
			if !math.IsNaN(v) && !math.IsInf(v, 0) {
				fields[k] = v
			}
		}
		if p := row.pt; p != nil {
			addf("H", p.H)
			addf("B", p.B)
			addf("J", p.J)
		}
		if s := row.raw; s != nil {
			addf("I", s.I)
			addf("psi", s.Psi)
			addf("V", s.V)
			addf("setpoint", s.Setpoint)
			addf("b_probe", s.BProbe)
			addf("temp", s.TempC)
		}
		if len(fields) == 0 {
			continue
		}
		fields["t"] = row.t.Seconds()
		ts := base.Add(row.t)
		if ms := ts.UnixMilli(); ms <= lastMs {
			ts = time.UnixMilli(lastMs + 1)
		}
		lastMs = ts.UnixMilli()
		st := make(map[string]string, len(tags)+1)
		for k, v := range tags {
			st[k] = v
		}
		st["branch"] = row.branch
		out = append(out, write.NewPoint(SampleMeasurement, st, fields, ts.UTC()))
	}

	ff := map[string]any{}
	for _, f := range l.Figures {
		if f.Name == "" {
			continue
		}
		if !math.IsNaN(f.Value) && !math.IsInf(f.Value, 0) {
			ff[f.Name] = f.Value
		}
		if !math.IsNaN(f.U) && !math.IsInf(f.U, 0) {
			ff[f.Name+"_u"] = f.U
		}
	}
	if len(ff) > 0 {
		ft := make(map[string]string, len(tags)+1)
		for k, v := range tags {
			ft[k] = v
		}
		put2 := func(k, v string) {
			if v != "" {
				ft[k] = v
			}
		}
		put2("kind", l.Kind)
		at := l.Started
		if at.IsZero() {
			at = base
			if len(rows) > 0 {
				at = base.Add(rows[0].t)
			}
		}
		out = append(out, write.NewPoint(FigureMeasurement, ft, ff, at.UTC()))
	}
	return out, nil
}

type sampleRow struct {
	t      time.Duration
	raw    *record.Sample
	pt     *record.Point
	branch string
}

// joinSamples pairs raw samples with the corrected points of the same T and
// returns them ordered by T (stable: ties keep the raw order).
func joinSamples(l record.Loop) []sampleRow {
	byT := make(map[time.Duration]int, len(l.Points))
	for i := range l.Points {
		if _, dup := byT[l.Points[i].T]; !dup {
			byT[l.Points[i].T] = i
		}
	}
	used := make([]bool, len(l.Points))
	rows := make([]sampleRow, 0, len(l.Raw))
	sorted := true
	for i := range l.Raw {
		s := &l.Raw[i]
		row := sampleRow{t: s.T, raw: s}
		if j, ok := byT[s.T]; ok && !used[j] {
			used[j] = true
			row.pt = &l.Points[j]
			row.branch = branchOf(l.Points[j].Branch)
		} else {
			switch s.Phase {
			case record.PreHold:
				row.branch = BranchPre
			case record.PostHold:
				row.branch = BranchPost
			default:
				row.branch = BranchInitial
			}
		}
		if len(rows) > 0 && row.t < rows[len(rows)-1].t {
			sorted = false
		}
		rows = append(rows, row)
	}
	for j := range l.Points {
		if !used[j] {
			p := &l.Points[j]
			rows = append(rows, sampleRow{t: p.T, pt: p, branch: branchOf(p.Branch)})
			sorted = false
		}
	}
	if !sorted {
		sort.SliceStable(rows, func(a, b int) bool { return rows[a].t < rows[b].t })
	}
	return rows
}

func branchOf(b int) string {
	switch {
	case b > 0:
		return BranchRising
	case b < 0:
		return BranchFalling
	}
	return BranchInitial
}

// WriteLineProtocol writes the points of a loop (see Points) as line
// protocol with nanosecond timestamps, one point per line: the same bytes the
// forwarder sends.
func WriteLineProtocol(w io.Writer, r record.Run, l record.Loop) (int, error) {
	pts, err := Points(r, l)
	if err != nil {
		return 0, err
	}
	// The encoder set up exactly as the client's write service does.
	e := lp.NewEncoder(w)
	e.SetFieldTypeSupport(lp.UintSupport)
	e.FailOnFieldErr(true)
	e.SetPrecision(time.Nanosecond)
	for i, p := range pts {
		if _, err := e.Encode(p); err != nil {
			return i, err
		}
	}
	return len(pts), nil
}
