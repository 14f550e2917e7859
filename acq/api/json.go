package api

import (
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"strconv"
	"time"

	"hystd/acq/process"
	"hystd/acq/record"
)

// num is a float64 that encodes NaN and ±Inf as JSON null (an absent
// channel, an unevaluated uncertainty).
type num float64

// MarshalJSON implements json.Marshaler.
func (n num) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, f, 'g', -1, 64), nil
}

// nums is a column of floats encoded in one pass (NaN and ±Inf as null);
// a 100 k-point loop has four of them.
type nums []float64

// MarshalJSON implements json.Marshaler.
func (ns nums) MarshalJSON() ([]byte, error) {
	b := make([]byte, 0, 2+len(ns)*12)
	b = append(b, '[')
	for i, f := range ns {
		if i > 0 {
			b = append(b, ',')
		}
		if math.IsNaN(f) || math.IsInf(f, 0) {
			b = append(b, "null"...)
			continue
		}
		b = strconv.AppendFloat(b, f, 'g', -1, 64)
	}
	return append(b, ']'), nil
}

// stamp is a time that encodes the zero time as null.
type stamp time.Time

// MarshalJSON implements json.Marshaler.
func (t stamp) MarshalJSON() ([]byte, error) {
	if time.Time(t).IsZero() {
		return []byte("null"), nil
	}
	return json.Marshal(time.Time(t).UTC())
}

type runJSON struct {
	ID         string       `json:"id"`
	Recipe     string       `json:"recipe"`
	Fixture    string       `json:"fixture"`
	Specimen   string       `json:"specimen"`
	Material   string       `json:"material"`
	State      record.State `json:"state"`
	Reason     string       `json:"reason"`
	Software   string       `json:"software"`
	ConfigHash string       `json:"config_hash"`
	Queued     stamp        `json:"queued"`
	Started    stamp        `json:"started"`
	Ended      stamp        `json:"ended"`
	RecipeText string       `json:"recipe_text,omitempty"`
	Config     string       `json:"config,omitempty"`
	Grade      string       `json:"grade,omitempty"`
	Operator   string       `json:"operator,omitempty"`
	// Verdict is the worst verdict over the run's loops (fail, undecided,
	// pass); "" when none was judged. Filled in the runs list.
	Verdict string `json:"verdict,omitempty"`
	// Revision is the run's latest revision (1: never re-processed); in
	// GET /runs/{id} the revision shown, with every revision listed.
	Revision  int            `json:"revision"`
	Revisions []revisionJSON `json:"revisions,omitempty"`
}

// revisionJSON is one processing of a run's raw samples (record.Revision).
type revisionJSON struct {
	N          int    `json:"n"`
	At         stamp  `json:"at"`
	By         string `json:"by"`
	Change     string `json:"change"`
	Fixture    string `json:"fixture"`
	Specimen   string `json:"specimen"`
	Material   string `json:"material"`
	Grade      string `json:"grade,omitempty"`
	ConfigHash string `json:"config_hash"`
}

func toRevisions(vs []record.Revision) []revisionJSON {
	out := make([]revisionJSON, 0, len(vs))
	for _, v := range vs {
		out = append(out, revisionJSON{v.N, stamp(v.At), v.By, v.Change, v.Fixture, v.Specimen, v.Material, v.Grade, v.ConfigHash})
	}
	return out
}

func toRun(r record.Run, full bool) runJSON {
	j := runJSON{ID: r.ID, Recipe: r.Recipe, Fixture: r.Fixture, Specimen: r.Specimen, Material: r.Material,
		State: r.State, Reason: r.Reason, Software: r.Software, ConfigHash: r.ConfigHash,
		Queued: stamp(r.Queued), Started: stamp(r.Started), Ended: stamp(r.Ended), Grade: r.Grade, Operator: r.Operator,
		Revision: max(r.Revision, 1)}
	if full {
		j.RecipeText, j.Config = r.RecipeText, r.Config
	}
	return j
}

type figureJSON struct {
	Name  string `json:"name"`
	Value num    `json:"value"`
	U     num    `json:"u"` // expanded, k = 2
	Unit  string `json:"unit"`
	Note  string `json:"note"`
}

type correctionJSON struct {
	Name string `json:"name"`
	Size num    `json:"size"`
	Unit string `json:"unit"`
	Note string `json:"note"`
}

// verdictJSON is one figure judged against a grade's limit (acq/grade).
type verdictJSON struct {
	Grade   string `json:"grade"`
	Figure  string `json:"figure"`
	Value   num    `json:"value"`
	U       num    `json:"u"`
	Min     num    `json:"min"` // null: no lower limit
	Max     num    `json:"max"` // null: no upper limit
	Unit    string `json:"unit"`
	Rule    string `json:"rule"`
	Outcome string `json:"outcome"` // pass, fail, undecided
	Note    string `json:"note"`
}

type loopJSON struct {
	RunID       string           `json:"run_id"`
	N           int              `json:"n"`
	Kind        string           `json:"kind"`
	Amplitude   num              `json:"amplitude"`
	AmpUnit     string           `json:"amplitude_unit"`
	Started     stamp            `json:"started"`
	Figures     []figureJSON     `json:"figures"`
	Corrections []correctionJSON `json:"corrections"`
	Verdicts    []verdictJSON    `json:"verdicts"`
	NPoints     int              `json:"n_points"` // points stored
	// Flags are plausibility findings ("implausible — check geometry and
	// turns: …", acq/process.Implausible); empty for a plausible loop.
	Flags []string `json:"flags"`
	// Stride is 1 when points holds every stored point, k when only every
	// k-th (and the last) was sent because of ?max_points.
	Stride int `json:"points_stride,omitempty"`
	// Points are columns (t in s, H in A/m, B and J in T, branch) so that a
	// 100 k-point loop stays compact.
	Points *pointsJSON `json:"points,omitempty"`
	Raw    *rawJSON    `json:"raw,omitempty"`
}

type pointsJSON struct {
	T      nums  `json:"t_s"`
	H      nums  `json:"h_a_m"`
	B      nums  `json:"b_t"`
	J      nums  `json:"j_t"`
	Branch []int `json:"branch"`
}

type rawJSON struct {
	T        nums     `json:"t_s"`
	TUnc     nums     `json:"t_unc_s"`
	Phase    []string `json:"phase"`
	Setpoint nums     `json:"setpoint"`
	I        nums     `json:"i_a"`
	V        nums     `json:"v_v"`
	Psi      nums     `json:"psi_wb"`
	BProbe   nums     `json:"b_probe_t"`
	TempC    nums     `json:"temp_c"`
	DtI      nums     `json:"dt_i_s"`       // current read time − t_s
	DtB      nums     `json:"dt_b_probe_s"` // field-meter read time − t_s
}

func toLoop(l record.Loop, withPoints, withRaw bool) loopJSON {
	j := loopJSON{RunID: l.RunID, N: l.N, Kind: l.Kind, Amplitude: num(l.Amplitude), AmpUnit: l.AmpUnit,
		Started: stamp(l.Started), Figures: []figureJSON{}, Corrections: []correctionJSON{}, Verdicts: []verdictJSON{}, NPoints: len(l.Points),
		Flags: process.Implausible(l)}
	if j.Flags == nil {
		j.Flags = []string{}
	}
	for _, v := range l.Verdicts {
		j.Verdicts = append(j.Verdicts, verdictJSON{v.Grade, v.Figure, num(v.Value), num(v.U), num(v.Min), num(v.Max), v.Unit, v.Rule, string(v.Outcome), v.Note})
	}
	for _, f := range l.Figures {
		j.Figures = append(j.Figures, figureJSON{f.Name, num(f.Value), num(f.U), f.Unit, f.Note})
	}
	for _, c := range l.Corrections {
		j.Corrections = append(j.Corrections, correctionJSON{c.Name, num(c.Size), c.Unit, c.Note})
	}
	if withPoints {
		n := len(l.Points)
		p := &pointsJSON{make(nums, n), make(nums, n), make(nums, n), make(nums, n), make([]int, n)}
		for i, q := range l.Points {
			p.T[i], p.H[i], p.B[i], p.J[i], p.Branch[i] = q.T.Seconds(), q.H, q.B, q.J, q.Branch
		}
		j.Points = p
	}
	if withRaw {
		n := len(l.Raw)
		r := &rawJSON{make(nums, n), make(nums, n), make([]string, n), make(nums, n), make(nums, n),
			make(nums, n), make(nums, n), make(nums, n), make(nums, n), make(nums, n), make(nums, n)}
		for i, s := range l.Raw {
			r.T[i], r.TUnc[i], r.Phase[i], r.Setpoint[i] = s.T.Seconds(), s.TUnc.Seconds(), string(s.Phase), s.Setpoint
			r.I[i], r.V[i], r.Psi[i], r.BProbe[i], r.TempC[i] = s.I, s.V, s.Psi, s.BProbe, s.TempC
			r.DtI[i], r.DtB[i] = s.DtI.Seconds(), s.DtB.Seconds()
		}
		j.Raw = r
	}
	return j
}

type eventJSON struct {
	At    stamp  `json:"at"`
	Level string `json:"level"`
	Text  string `json:"text"`
}

type trendJSON struct {
	RunID string `json:"run_id"`
	Loop  int    `json:"loop"`
	At    stamp  `json:"at"`
	Value num    `json:"value"`
	U     num    `json:"u"`
	// Filled when the trend is filtered or judged (see trend.go).
	Kind      string `json:"kind,omitempty"`
	Amplitude *num   `json:"amplitude,omitempty"`
	AmpUnit   string `json:"amplitude_unit,omitempty"`
	Recipe    string `json:"recipe,omitempty"`
	Fixture   string `json:"fixture,omitempty"`
	Verdict   string `json:"verdict,omitempty"`
}

// writeJSON writes v with status code c.
func writeJSON(w http.ResponseWriter, c int, v any) {
	w.Header().Set("Content-Type", "application/json; charset=utf-8")
	w.WriteHeader(c)
	enc := json.NewEncoder(w)
	_ = enc.Encode(v) // the client may be gone; nothing else to do
}

// writeError writes {"error": "..."} with status code c.
func writeError(w http.ResponseWriter, c int, format string, args ...any) {
	writeJSON(w, c, map[string]string{"error": fmt.Sprintf(format, args...)})
}
