package export

import (
	"encoding/json"
	"io"
	"math"
	"time"

	"hystd/acq/record"
)

// num is a float that encodes NaN and ±Inf as null (JSON has no NaN).
type num float64

func (n num) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return json.Marshal(f)
}

// jsonTime is an RFC 3339 time with nanoseconds, or null when zero.
type jsonTime time.Time

func (t jsonTime) MarshalJSON() ([]byte, error) {
	if time.Time(t).IsZero() {
		return []byte("null"), nil
	}
	return json.Marshal(time.Time(t).UTC().Format(time.RFC3339Nano))
}

// The JSON document: keys are SI-suffixed where a unit applies.
type jsonDoc struct {
	Run    jsonRun     `json:"run"`
	Loops  []jsonLoop  `json:"loops"`
	Events []jsonEvent `json:"events"`
}

type jsonRun struct {
	ID         string   `json:"id"`
	Recipe     string   `json:"recipe"`
	RecipeText string   `json:"recipe_text"`
	Fixture    string   `json:"fixture"`
	Specimen   string   `json:"specimen"`
	Material   string   `json:"material"`
	Config     string   `json:"config"`
	ConfigHash string   `json:"config_sha256"`
	Software   string   `json:"software"`
	State      string   `json:"state"`
	Reason     string   `json:"reason"`
	Queued     jsonTime `json:"queued"`
	Started    jsonTime `json:"started"`
	Ended      jsonTime `json:"ended"`
	// Revision is the revision exported (fixture, specimen and config are
	// its own); Revisions lists every revision of a re-processed run
	// (absent for a run with one).
	Revision  int            `json:"revision"`
	Revisions []jsonRevision `json:"revisions,omitempty"`
}

type jsonRevision struct {
	N          int      `json:"n"`
	At         jsonTime `json:"at"`
	By         string   `json:"by"`
	Change     string   `json:"change"`
	Fixture    string   `json:"fixture"`
	Specimen   string   `json:"specimen"`
	ConfigHash string   `json:"config_sha256"`
}

type jsonLoop struct {
	N           int              `json:"n"`
	Kind        string           `json:"kind"`
	Amplitude   num              `json:"amplitude"`
	AmpUnit     string           `json:"amplitude_unit"`
	Started     jsonTime         `json:"started"`
	Figures     []jsonFigure     `json:"figures"`
	Corrections []jsonCorrection `json:"corrections"`
	Raw         []jsonSample     `json:"raw"`
	Points      []jsonPoint      `json:"points"`
}

type jsonFigure struct {
	Name  string `json:"name"`
	Value num    `json:"value"`
	U     num    `json:"u_k2"`
	Unit  string `json:"unit"`
	Note  string `json:"note"`
}

type jsonCorrection struct {
	Name string `json:"name"`
	Size num    `json:"size"`
	Unit string `json:"unit"`
	Note string `json:"note"`
}

type jsonSample struct {
	T        num    `json:"t_s"`
	TUnc     num    `json:"t_unc_s"`
	Phase    string `json:"phase"`
	Setpoint num    `json:"setpoint"`
	I        num    `json:"i_a"`
	V        num    `json:"v_v"`
	Psi      num    `json:"psi_wb"`
	BProbe   num    `json:"b_probe_t"`
	TempC    num    `json:"temp_c"`
	DtI      num    `json:"dt_i_s"`       // current read time − t_s
	DtB      num    `json:"dt_b_probe_s"` // field-meter read time − t_s
}

type jsonPoint struct {
	T      num `json:"t_s"`
	H      num `json:"h_a_m"`
	B      num `json:"b_t"`
	J      num `json:"j_t"`
	Branch int `json:"branch"`
}

type jsonEvent struct {
	At    jsonTime `json:"at"`
	Level string   `json:"level"`
	Text  string   `json:"text"`
}

func writeJSON(w io.Writer, r record.Run, rev int, revs []record.Revision, loops []record.Loop, evs []record.Event) error {
	d := jsonDoc{
		Run: jsonRun{ID: r.ID, Recipe: r.Recipe, RecipeText: r.RecipeText, Fixture: r.Fixture, Specimen: r.Specimen,
			Material: r.Material, Config: r.Config, ConfigHash: r.ConfigHash, Software: r.Software, State: string(r.State),
			Reason: r.Reason, Queued: jsonTime(r.Queued), Started: jsonTime(r.Started), Ended: jsonTime(r.Ended),
			Revision: rev},
		Loops:  make([]jsonLoop, 0, len(loops)),
		Events: make([]jsonEvent, 0, len(evs)),
	}
	for _, l := range loops {
		jl := jsonLoop{N: l.N, Kind: l.Kind, Amplitude: num(l.Amplitude), AmpUnit: l.AmpUnit, Started: jsonTime(l.Started),
			Figures: make([]jsonFigure, 0, len(l.Figures)), Corrections: make([]jsonCorrection, 0, len(l.Corrections)),
			Raw: make([]jsonSample, 0, len(l.Raw)), Points: make([]jsonPoint, 0, len(l.Points))}
		for _, f := range l.Figures {
			jl.Figures = append(jl.Figures, jsonFigure{f.Name, num(f.Value), num(f.U), f.Unit, f.Note})
		}
		for _, c := range l.Corrections {
			jl.Corrections = append(jl.Corrections, jsonCorrection{c.Name, num(c.Size), c.Unit, c.Note})
		}
		for _, s := range l.Raw {
			jl.Raw = append(jl.Raw, jsonSample{num(s.T.Seconds()), num(s.TUnc.Seconds()), string(s.Phase), num(s.Setpoint),
				num(s.I), num(s.V), num(s.Psi), num(s.BProbe), num(s.TempC), num(s.DtI.Seconds()), num(s.DtB.Seconds())})
		}
		for _, p := range l.Points {
			jl.Points = append(jl.Points, jsonPoint{num(p.T.Seconds()), num(p.H), num(p.B), num(p.J), p.Branch})
		}
		d.Loops = append(d.Loops, jl)
	}
	if len(revs) > 1 {
		for _, v := range revs {
			d.Run.Revisions = append(d.Run.Revisions, jsonRevision{v.N, jsonTime(v.At), v.By, v.Change, v.Fixture, v.Specimen, v.ConfigHash})
		}
	}
	for _, e := range evs {
		d.Events = append(d.Events, jsonEvent{jsonTime(e.At), e.Level, e.Text})
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", " ")
	return enc.Encode(d)
}
