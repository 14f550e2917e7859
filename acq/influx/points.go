package influx

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
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
	// (its SI value) and NAME_u (its expanded uncertainty, k = 2). A loop
	// judged against a material grade also carries the tags grade, rule and
	// verdict (the loop's worst outcome: pass, undecided or fail) and, per
	// judged figure, the float field NAME_verdict: 1 pass, 0 undecided, −1 fail.
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
	return Encoding{}.Points(r, l)
}

// Encoding adds deployment facts to what Points and Lines derive from the
// stored run and loop.
type Encoding struct {
	// Tags are static tags (site, bay, host …) put on every point. Names in
	// ReservedTags are refused.
	Tags map[string]string
}

// Points is Points with e's tags on every point.
func (e Encoding) Points(r record.Run, l record.Loop) ([]*write.Point, error) {
	sp, err := e.plan(r, l)
	if err != nil {
		return nil, err
	}
	out := make([]*write.Point, 0, len(sp.rows)+1)
	for i := range sp.rows {
		row := &sp.rows[i]
		if row.n == 0 {
			continue
		}
		fields := make(map[string]any, row.n)
		for k, name := range sampleFields {
			if row.set&(1<<k) != 0 {
				fields[name] = row.v[k]
			}
		}
		tags := make(map[string]string, len(sp.tags)+1)
		for k, v := range sp.tags {
			tags[k] = v
		}
		tags["branch"] = row.branch
		out = append(out, write.NewPoint(SampleMeasurement, tags, fields, row.ts))
	}
	if fp := figurePoint(sp, l); fp != nil {
		out = append(out, fp)
	}
	return out, nil
}

// Lines returns the line protocol of Points(r, l), one line per point
// without the trailing newline, byte for byte what the client's encoder
// makes of Points (nanosecond timestamps). It is the forwarder's fast path.
func Lines(r record.Run, l record.Loop) ([]string, error) {
	return Encoding{}.Lines(r, l)
}

// Lines is Lines with e's tags on every point.
func (e Encoding) Lines(r record.Run, l record.Loop) ([]string, error) {
	sp, err := e.plan(r, l)
	if err != nil {
		return nil, err
	}
	prefix := map[string][]byte{}
	out := make([]string, 0, len(sp.rows)+1)
	buf := make([]byte, 0, 512)
	for i := range sp.rows {
		row := &sp.rows[i]
		if row.n == 0 {
			continue
		}
		pre, ok := prefix[row.branch]
		if !ok {
			tags := make(map[string]string, len(sp.tags)+1)
			for k, v := range sp.tags {
				tags[k] = v
			}
			tags["branch"] = row.branch
			if pre, err = linePrefix(SampleMeasurement, tags); err != nil {
				return nil, err
			}
			prefix[row.branch] = pre
		}
		buf = append(buf[:0], pre...)
		first := true
		for k, name := range sampleFields {
			if row.set&(1<<k) == 0 {
				continue
			}
			if !first {
				buf = append(buf, ',')
			}
			first = false
			buf = append(buf, name...)
			buf = append(buf, '=')
			buf = strconv.AppendFloat(buf, row.v[k], 'f', -1, 64)
		}
		buf = append(buf, ' ')
		buf = strconv.AppendInt(buf, row.ts.UnixNano(), 10)
		out = append(out, string(buf))
	}
	if fp := figurePoint(sp, l); fp != nil {
		var b bytes.Buffer
		if err := encode(&b, fp); err != nil {
			return nil, err
		}
		out = append(out, strings.TrimSuffix(b.String(), "\n"))
	}
	return out, nil
}

// sampleFields are the field keys of a sample point in the order the
// client's encoder writes them (sorted by byte value).
var sampleFields = [...]string{"B", "H", "I", "J", "V", "b_probe", "psi", "setpoint", "t", "temp"}

const (
	fB = iota
	fH
	fI
	fJ
	fV
	fBProbe
	fPsi
	fSetpoint
	fT
	fTemp
)

// plannedRow is one sample point: its finite field values and timestamp.
type plannedRow struct {
	sampleRow
	v   [len(sampleFields)]float64
	set uint16 // bit k: v[k] is present
	n   int    // number of values besides t; 0 means the point is left out
	ts  time.Time
}

type samplePlan struct {
	base     time.Time
	tags     map[string]string // without branch
	software string            // the run's software, a tag of the figure point
	rows     []plannedRow
}

func (e Encoding) plan(r record.Run, l record.Loop) (*samplePlan, error) {
	base, err := Base(r)
	if err != nil {
		return nil, err
	}
	sp := &samplePlan{base: base, tags: map[string]string{}, software: r.Software}
	for _, k := range sortedKeys(e.Tags) {
		if msg := tagProblem(k, e.Tags[k]); msg != "" {
			return nil, fmt.Errorf("static tag %s: %s", k, msg)
		}
		sp.tags[k] = e.Tags[k]
	}
	put := func(k, v string) {
		if v != "" {
			sp.tags[k] = v
		}
	}
	put("fixture", r.Fixture)
	put("specimen", r.Specimen)
	put("material", r.Material)
	put("run", r.ID)
	put("loop", strconv.Itoa(l.N))
	if l.Revision > 1 {
		// Revision 1 carries no revision tag: its points are those sent
		// before re-processing existed, and stay one series with them.
		put("revision", strconv.Itoa(l.Revision))
	}
	rows := joinSamples(l)
	sp.rows = make([]plannedRow, len(rows))
	var lastMs int64 = math.MinInt64
	for i, row := range rows {
		pr := &sp.rows[i]
		pr.sampleRow = row
		add := func(k int, v float64) {
			if !math.IsNaN(v) && !math.IsInf(v, 0) {
				pr.v[k] = v
				pr.set |= 1 << k
				pr.n++
			}
		}
		if p := row.pt; p != nil {
			add(fH, p.H)
			add(fB, p.B)
			add(fJ, p.J)
		}
		if s := row.raw; s != nil {
			add(fI, s.I)
			add(fPsi, s.Psi)
			add(fV, s.V)
			add(fSetpoint, s.Setpoint)
			add(fBProbe, s.BProbe)
			add(fTemp, s.TempC)
		}
		if pr.n == 0 {
			continue
		}
		pr.v[fT] = row.t.Seconds()
		pr.set |= 1 << fT
		ts := base.Add(row.t)
		if ms := ts.UnixMilli(); ms <= lastMs {
			ts = time.UnixMilli(lastMs + 1)
		}
		lastMs = ts.UnixMilli()
		pr.ts = ts.UTC()
	}
	return sp, nil
}

// figurePoint is the loop's figure point, or nil when it has no finite
// figure. Besides the sample points' tags it carries kind and software (the
// build that recorded the run, see package buildinfo).
func figurePoint(sp *samplePlan, l record.Loop) *write.Point {
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
	if len(ff) == 0 {
		return nil
	}
	ft := make(map[string]string, len(sp.tags)+1)
	for k, v := range sp.tags {
		ft[k] = v
	}
	if l.Kind != "" {
		ft["kind"] = l.Kind
	}
	if len(l.Verdicts) > 0 {
		ft["grade"], ft["rule"], ft["verdict"] = l.Verdicts[0].Grade, l.Verdicts[0].Rule, string(record.Worst(l.Verdicts))
		for _, v := range l.Verdicts {
			ff[v.Figure+"_verdict"] = map[record.Outcome]float64{record.Pass: 1, record.Undecided: 0, record.Fail: -1}[v.Outcome]
		}
	}
	if sp.software != "" {
		ft["software"] = sp.software
	}
	at := l.Started
	if at.IsZero() {
		at = sp.base
		if len(sp.rows) > 0 {
			at = sp.base.Add(sp.rows[0].t)
		}
	}
	return write.NewPoint(FigureMeasurement, ft, ff, at.UTC())
}

// encode writes p with the encoder set up exactly as the client's write
// service sets it up.
func encode(w io.Writer, p *write.Point) error {
	e := lp.NewEncoder(w)
	e.SetFieldTypeSupport(lp.UintSupport)
	e.FailOnFieldErr(true)
	e.SetPrecision(time.Nanosecond)
	_, err := e.Encode(p)
	return err
}

// linePrefix is "measurement,tags " as the client's encoder escapes them.
func linePrefix(meas string, tags map[string]string) ([]byte, error) {
	var b bytes.Buffer
	if err := encode(&b, write.NewPoint(meas, tags, map[string]any{"x": 0.0}, time.Unix(0, 1))); err != nil {
		return nil, err
	}
	line := b.Bytes()
	const tail = "x=0 1\n"
	if !bytes.HasSuffix(line, []byte(tail)) {
		return nil, fmt.Errorf("influx: unexpected encoding %q", line)
	}
	return line[:len(line)-len(tail)], nil
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
// forwarder sends. It returns the number of lines written.
func WriteLineProtocol(w io.Writer, r record.Run, l record.Loop) (int, error) {
	lines, err := Lines(r, l)
	if err != nil {
		return 0, err
	}
	for i, line := range lines {
		if _, err := io.WriteString(w, line+"\n"); err != nil {
			return i, err
		}
	}
	return len(lines), nil
}
