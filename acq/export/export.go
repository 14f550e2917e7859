// Package export writes a stored run in one of the exchange formats of
// `hystd export`: CSV (samples), JSON (everything), line protocol (the same
// points the forwarder sends), SVG and PNG (the loop plot).
//
// Export only reads: it takes a record.Reader and never changes the store.
package export

import (
	"bufio"
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"

	"hystd/acq/influx"
	"hystd/acq/plot"
	"hystd/acq/record"
)

// Format is an export format name.
type Format string

// Formats.
const (
	CSV  Format = "csv"
	JSON Format = "json"
	LP   Format = "lp"
	SVG  Format = "svg"
	PNG  Format = "png"
)

// Formats lists the format names in the order help texts show them.
func Formats() []Format { return []Format{CSV, JSON, LP, SVG, PNG} }

// ParseFormat accepts a format name, case-insensitively.
func ParseFormat(s string) (Format, error) {
	f := Format(strings.ToLower(strings.TrimSpace(s)))
	for _, k := range Formats() {
		if f == k {
			return f, nil
		}
	}
	names := make([]string, 0, 5)
	for _, k := range Formats() {
		names = append(names, string(k))
	}
	return "", fmt.Errorf("unknown format %q: want one of %s", s, strings.Join(names, ", "))
}

// Options select what is exported.
type Options struct {
	// Loop exports only loop n (1-based); 0 exports every loop of the run.
	Loop int
	// AllSamples makes the CSV include the samples without a corrected
	// point (the drift holds before and after the sweep), with empty H, B
	// and J cells. By default the CSV holds the loop only, one row per
	// corrected point, which `hystd analyze` reads as it is.
	AllSamples bool
	// Plot passes drawing options to SVG and PNG.
	Plot plot.Options
	// Revision exports that revision of the run (0: the latest). The run
	// is shown with that revision's fixture, specimen and config.
	Revision int
}

// Write exports run id from rd to w in format f. Errors name the run, the
// loop or the format; record.ErrNotFound is wrapped for an unknown run or
// loop. w is not closed.
func Write(ctx context.Context, w io.Writer, rd record.Reader, id string, f Format, o Options) error {
	if _, err := ParseFormat(string(f)); err != nil {
		return err
	}
	if o.Loop < 0 {
		return fmt.Errorf("loop %d: loops are numbered from 1", o.Loop)
	}
	if o.Revision < 0 {
		return fmt.Errorf("revision %d: revisions are numbered from 1", o.Revision)
	}
	r, err := rd.Run(ctx, id)
	if err != nil {
		return err
	}
	revs, err := rd.Revisions(ctx, r.ID)
	if err != nil {
		return err
	}
	rev := o.Revision
	if rev == 0 {
		rev = len(revs)
	}
	if rev > len(revs) {
		return fmt.Errorf("run %s revision %d (it has %d): %w", r.ID, rev, len(revs), record.ErrNotFound)
	}
	r = r.At(revs[rev-1])
	loops, err := load(ctx, rd, r.ID, o.Loop, rev)
	if err != nil {
		return err
	}
	switch f {
	case CSV:
		return writeCSV(w, r, loops, o.AllSamples)
	case JSON:
		var evs []record.Event
		if evs, err = rd.Events(ctx, r.ID); err != nil {
			return err
		}
		return writeJSON(w, r, rev, revs, loops, evs)
	case LP:
		bw := bufio.NewWriter(w)
		for _, l := range loops {
			if _, err := influx.WriteLineProtocol(bw, r, l); err != nil {
				return fmt.Errorf("run %s loop %d: %w", r.ID, l.N, err)
			}
		}
		return bw.Flush()
	case SVG, PNG:
		po := o.Plot
		if po.Title == "" {
			po.Title = fmt.Sprintf("%s · %s · %s", r.ID, r.Specimen, r.Fixture)
			if len(revs) > 1 {
				po.Title += fmt.Sprintf(" · revision %d", rev)
			}
		}
		if f == SVG {
			err = plot.SVG(w, loops, po)
		} else {
			err = plot.PNG(w, loops, po)
		}
		if err != nil {
			return fmt.Errorf("run %s: %w", r.ID, err)
		}
		return nil
	}
	return nil
}

// load reads loop n, or every loop of revision rev of the run with its samples.
func load(ctx context.Context, rd record.Reader, id string, n, rev int) ([]record.Loop, error) {
	if n > 0 {
		l, err := rd.LoopOf(ctx, id, n, rev)
		if err != nil {
			return nil, err
		}
		return []record.Loop{l}, nil
	}
	sum, err := rd.LoopsOf(ctx, id, rev)
	if err != nil {
		return nil, err
	}
	out := make([]record.Loop, 0, len(sum))
	for _, s := range sum {
		l, err := rd.LoopOf(ctx, id, s.N, rev)
		if err != nil {
			return nil, err
		}
		out = append(out, l)
	}
	return out, nil
}

// CSVHeader is the header row of the CSV export; H, B and t are the columns
// `hystd analyze` reads. Units: t s (since the run
// started), setpoint A or A/m (the loop's amplitude unit), I A, V V, psi
// Wb-turns, B_probe T, temp °C, H A/m, B T, J T, dt_I and dt_B_probe s
// (when the current and the probe field were read, minus t, which is the
// flux reading's time). A missing value is an
// empty cell.
var CSVHeader = []string{"run", "loop", "t", "phase", "branch", "setpoint", "I", "V", "psi", "B_probe", "temp", "H", "B", "J", "dt_I", "dt_B_probe"}

// writeCSV writes one row per corrected point joined with the raw sample of
// the same T, ordered by T within each loop; with all, the raw samples
// without a corrected point get rows too.
func writeCSV(w io.Writer, r record.Run, loops []record.Loop, all bool) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(CSVHeader); err != nil {
		return err
	}
	num := func(v float64) string {
		if math.IsNaN(v) {
			return ""
		}
		return strconv.FormatFloat(v, 'g', -1, 64)
	}
	for _, l := range loops {
		for _, row := range join(l) {
			if row.pt == nil && !all {
				continue
			}
			rec := make([]string, 0, len(CSVHeader))
			rec = append(rec, r.ID, strconv.Itoa(l.N), strconv.FormatFloat(row.t.Seconds(), 'f', -1, 64))
			if s := row.raw; s != nil {
				rec = append(rec, string(s.Phase))
			} else {
				rec = append(rec, string(record.Sweep))
			}
			if p := row.pt; p != nil {
				rec = append(rec, strconv.Itoa(p.Branch))
			} else {
				rec = append(rec, "")
			}
			if s := row.raw; s != nil {
				rec = append(rec, num(s.Setpoint), num(s.I), num(s.V), num(s.Psi), num(s.BProbe), num(s.TempC))
			} else {
				rec = append(rec, "", "", "", "", "", "")
			}
			if p := row.pt; p != nil {
				rec = append(rec, num(p.H), num(p.B), num(p.J))
			} else {
				rec = append(rec, "", "", "")
			}
			// The current's and the probe's read times minus t (the flux
			// reading's), s; the probe's is empty where there is no probe.
			if s := row.raw; s != nil {
				dtB := ""
				if !math.IsNaN(s.BProbe) {
					dtB = num(s.DtB.Seconds())
				}
				rec = append(rec, num(s.DtI.Seconds()), dtB)
			} else {
				rec = append(rec, "", "")
			}
			if err := cw.Write(rec); err != nil {
				return err
			}
		}
	}
	cw.Flush()
	return cw.Error()
}

type row struct {
	t   time.Duration
	raw *record.Sample
	pt  *record.Point
}

func join(l record.Loop) []row {
	byT := make(map[time.Duration]int, len(l.Points))
	for i := range l.Points {
		if _, dup := byT[l.Points[i].T]; !dup {
			byT[l.Points[i].T] = i
		}
	}
	used := make([]bool, len(l.Points))
	rows := make([]row, 0, len(l.Raw))
	for i := range l.Raw {
		rw := row{t: l.Raw[i].T, raw: &l.Raw[i]}
		if j, ok := byT[rw.t]; ok && !used[j] {
			used[j] = true
			rw.pt = &l.Points[j]
		}
		rows = append(rows, rw)
	}
	for j := range l.Points {
		if !used[j] {
			rows = append(rows, row{t: l.Points[j].T, pt: &l.Points[j]})
		}
	}
	sort.SliceStable(rows, func(a, b int) bool { return rows[a].t < rows[b].t })
	return rows
}
