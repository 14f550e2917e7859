// Package calrec holds calibration records (`kind: calibration`): the
// calibrated values of a search coil (by fixture) or of an instrument (by
// role and identity) with their standard uncertainties, the certificate,
// the calibration date and the date it falls due. Apply corrects raw
// samples with them and returns the budget sources and notes for the run.
package calrec

import (
	"fmt"
	"io/fs"
	"math"
	"os"
	"strings"
	"time"

	"hystd/acq/check"
	"hystd/acq/config"
	"hystd/acq/process"
	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/calib/units"
	"hystd/configs"
	"hystd/drivers/instr"
)

// Kind is the document kind of a calibration record.
const Kind = "calibration"

func init() {
	check.Register(Kind, func(doc *configs.Doc) error { _, err := FromDoc(doc); return err })
}

// Value is a calibrated value with its standard uncertainty (k = 1) in the
// same unit.
type Value struct {
	Value float64 `yaml:"value"`
	U     float64 `yaml:"u"`
}

// Target says what a record calibrates: a fixture's search coil, or an
// instrument by role and identity (its *IDN? reply, as recorded with a run).
type Target struct {
	Fixture  string `yaml:"fixture"`
	Role     string `yaml:"role"`
	Identity string `yaml:"identity"`
}

// Coil holds a search coil's calibration.
type Coil struct {
	// AreaTurns is N2·A_c in m², as measured in a known field.
	AreaTurns *Value `yaml:"area_turns_m2"`
}

// Integrator holds an integrator's calibration: true ψ = (reading −
// offset)/gain.
type Integrator struct {
	Gain     *Value `yaml:"gain"`
	OffsetWb *Value `yaml:"offset_wb"`
}

// Probe holds a field meter's calibration: true B = (reading − offset) /
// (S·(1 + α·(T − T_ref))), T the sample's temperature (T_ref when none).
type Probe struct {
	Sensitivity *Value  `yaml:"sensitivity"`      // reading per tesla, 1 for a meter that reads in T
	TempCoeff   *Value  `yaml:"temp_coeff_per_k"` // α, 1/K
	RefTempC    float64 `yaml:"ref_temp_c"`
	OffsetT     *Value  `yaml:"offset_t"`
}

// Record is one calibration record.
type Record struct {
	Kind        string      `yaml:"kind"`
	ID          string      `yaml:"id"`
	AppliesTo   Target      `yaml:"applies_to"`
	Certificate string      `yaml:"certificate"`
	Date        string      `yaml:"date"` // YYYY-MM-DD
	Due         string      `yaml:"due"`  // YYYY-MM-DD
	Coil        *Coil       `yaml:"coil"`
	Integrator  *Integrator `yaml:"integrator"`
	Probe       *Probe      `yaml:"probe"`
	File        string      `yaml:"-"`

	date, due time.Time
}

// Load reads and validates a calibration record.
func Load(path string) (Record, error) {
	data, err := configs.ReadFile(path)
	if err != nil {
		return Record{}, err
	}
	doc, err := configs.Parse(path, data)
	if err != nil {
		return Record{}, err
	}
	return FromDoc(doc)
}

// FromDoc decodes and validates a parsed calibration document strictly:
// unknown keys, missing values and impossible values are FILE:LINE: key:
// problem errors.
func FromDoc(doc *configs.Doc) (Record, error) {
	var r Record
	if err := doc.Decode(&r); err != nil {
		return Record{}, err
	}
	r.File = doc.File
	var es configs.Errors
	add := func(path, f string, a ...any) { es = append(es, doc.Errorf(path, f, a...)) }
	r.checkHead(add)
	r.AppliesTo.check(add, &r)
	r.checkValues(add)
	if len(es) > 0 {
		return Record{}, es
	}
	return r, nil
}

// adder reports one problem of a record at the key at path.
type adder = func(path, f string, a ...any)

// checkHead checks the record's kind, id, certificate and dates, and
// fills its parsed dates.
func (r *Record) checkHead(add adder) {
	if r.Kind != Kind {
		add("kind", "want %q, got %q", Kind, r.Kind)
	}
	if r.ID == "" {
		add("id", "required")
	}
	if r.Certificate == "" {
		add("certificate", "required: the certificate's reference")
	}
	var err error
	if r.date, err = time.Parse(time.DateOnly, r.Date); err != nil {
		add("date", "%q: want YYYY-MM-DD", r.Date)
	}
	if r.due, err = time.Parse(time.DateOnly, r.Due); err != nil {
		add("due", "%q: want YYYY-MM-DD", r.Due)
	} else if !r.date.IsZero() && !r.due.After(r.date) {
		add("due", "%s is not after the calibration date %s", r.Due, r.Date)
	}
}

// check checks that the record applies to a fixture or to an instrument,
// and holds the one block that fits it.
func (t Target) check(add adder, r *Record) {
	switch {
	case t.Fixture != "" && (t.Role != "" || t.Identity != ""):
		add("applies_to", "a fixture (its search coil) or an instrument (role and identity), not both")
	case t.Fixture != "":
		if r.Coil == nil || r.Integrator != nil || r.Probe != nil {
			add("applies_to.fixture", "a fixture's record holds a coil block only")
		}
	case t.Role == instr.RoleIntegrator:
		if r.Integrator == nil || r.Coil != nil || r.Probe != nil {
			add("applies_to.role", "an integrator's record holds an integrator block only")
		}
	case t.Role == instr.RoleFieldMeter:
		if r.Probe == nil || r.Coil != nil || r.Integrator != nil {
			add("applies_to.role", "a field meter's record holds a probe block only")
		}
	case t.Role == "":
		add("applies_to", "needs fixture, or role (integrator, field_meter) and identity")
	default:
		add("applies_to.role", "%q: want integrator or field_meter", t.Role)
	}
	if t.Role != "" && t.Identity == "" {
		add("applies_to.identity", "required: the instrument's identity (*IDN? reply) as recorded with a run")
	}
}

// checkValues checks every calibrated value of the record's block.
func (r *Record) checkValues(add adder) {
	if r.Coil != nil {
		checkValue(add, "coil.area_turns_m2", r.Coil.AreaTurns, true, true)
	}
	if r.Integrator != nil {
		checkValue(add, "integrator.gain", r.Integrator.Gain, true, true)
		checkValue(add, "integrator.offset_wb", r.Integrator.OffsetWb, false, false)
	}
	if r.Probe != nil {
		checkValue(add, "probe.sensitivity", r.Probe.Sensitivity, true, true)
		checkValue(add, "probe.temp_coeff_per_k", r.Probe.TempCoeff, false, false)
		checkValue(add, "probe.offset_t", r.Probe.OffsetT, false, false)
	}
}

// checkValue checks one value and its standard uncertainty.
func checkValue(add adder, path string, v *Value, required, positive bool) {
	switch {
	case v == nil && required:
		add(path, "required")
	case v == nil:
	case !(v.U >= 0) || math.IsInf(v.U, 0):
		add(path+".u", "must be a finite standard uncertainty ≥ 0, got %g", v.U)
	case positive && !(v.Value > 0):
		add(path+".value", "must be > 0, got %g", v.Value)
	case math.IsInf(v.Value, 0) || math.IsNaN(v.Value):
		add(path+".value", "must be finite")
	}
}

// DueDate returns the date the record falls due (midnight UTC).
func (r Record) DueDate() time.Time { return r.due }

// PastDue reports whether the record is past due at t (after its due day).
func (r Record) PastDue(t time.Time) bool { return !t.Before(r.due.AddDate(0, 0, 1)) }

// Describe is the record as a run's event names it.
func (r Record) Describe() string {
	what := "fixture " + r.AppliesTo.Fixture + " search coil"
	if r.AppliesTo.Fixture == "" {
		what = r.AppliesTo.Role + " " + r.AppliesTo.Identity
	}
	return fmt.Sprintf("calibration %s (%s; certificate %s, %s, due %s)", r.ID, what, r.Certificate, r.Date, r.Due)
}

// UsedPrefix starts the event that names a calibration a run used
// ("used calibration ID (…)"); the report and the page list them from it.
const UsedPrefix = "used calibration "

// pastDueText follows the id in the warning for a record past due.
const pastDueText = " is past due"

// Listed returns the calibration records a run used, as its events name
// them ("ID (what; certificate C, date, due D)"), each followed by " — PAST
// DUE at the run" when the run warned so: for the page and the report.
func Listed(evs []record.Event) []string {
	late := map[string]bool{}
	for _, e := range evs {
		if rest, ok := strings.CutPrefix(e.Text, "calibration "); ok && e.Level == "warn" {
			if id, _, ok := strings.Cut(rest, pastDueText); ok {
				late[id] = true
			}
		}
	}
	var out []string
	for _, e := range evs {
		rest, ok := strings.CutPrefix(e.Text, UsedPrefix)
		if !ok {
			continue
		}
		if id, _, _ := strings.Cut(rest, " "); late[id] {
			rest += " — PAST DUE at the run"
		}
		out = append(out, rest)
	}
	return out
}

// Event is a note for the run that used the records.
type Event struct {
	Level, Text string
}

// Used is a set of records checked against one fixture, ready to correct
// samples (Correct) and to add their uncertainties to a budget (AddTo). The
// zero of *Used (nil) corrects nothing. Import and live runs both go through
// it, so a record changes the figures the same way whichever way the
// samples came.
type Used struct {
	Records []Record
	psiK    float64 // ψ ← (ψ − off)/gain·psiK
	off     float64
	gain    float64
	probe   *Probe
	sources []loop.Source // B-side sources; the probe's is added by AddTo when H comes from it
	probeU  loop.Source
}

// Use checks recs against fx (a coil record for another fixture, or for a
// fixture without winding.coil_area_mm2, is an error; so are two records of
// one kind) and returns them ready to apply, with an event per record (a
// warning for one past due at `at`).
func Use(recs []Record, fx config.Fixture, at time.Time) (*Used, []Event, error) {
	u := &Used{psiK: 1, gain: 1}
	var evs []Event
	seen := map[string]string{}
	for _, r := range recs {
		key := r.AppliesTo.Role
		if r.AppliesTo.Fixture != "" {
			key = "coil"
		}
		if prev, dup := seen[key]; dup {
			return nil, nil, fmt.Errorf("%s: a second %s calibration (the first: %s)", r.File, key, prev)
		}
		seen[key] = r.File
		evs = append(evs, Event{"info", "used " + r.Describe()}) // UsedPrefix
		if r.PastDue(at) {
			evs = append(evs, Event{"warn", fmt.Sprintf("calibration %s%s (due %s): figures rest on an expired calibration", r.ID, pastDueText, r.Due)})
		}
		note := "Type B: calibration " + r.ID + ", certificate " + r.Certificate
		switch {
		case r.Coil != nil:
			if r.AppliesTo.Fixture != fx.Name {
				return nil, nil, fmt.Errorf("%s: applies_to.fixture %q, but the fixture is %q", r.File, r.AppliesTo.Fixture, fx.Name)
			}
			ac := fx.Winding.CoilAreaMM2 * 1e-6
			if !(ac > 0) {
				return nil, nil, fmt.Errorf("%s: coil area-turns need the fixture's winding.coil_area_mm2 (fixture %s gives none)", r.File, fx.Name)
			}
			nac := r.Coil.AreaTurns
			u.psiK = float64(fx.Winding.N2) * ac / nac.Value
			u.sources = append(u.sources, loop.Source{Name: "coil area-turns", BScale: nac.U / nac.Value, Note: note})
		case r.Integrator != nil:
			g := r.Integrator.Gain
			u.gain = g.Value
			if o := r.Integrator.OffsetWb; o != nil {
				u.off = o.Value
			}
			u.sources = append(u.sources, loop.Source{Name: "integrator gain (calibration)", BScale: g.U / g.Value, Note: note})
		case r.Probe != nil:
			p := r.Probe
			u.probe = p
			var uo float64
			if p.OffsetT != nil {
				uo = p.OffsetT.U
			}
			u.probeU = loop.Source{Name: "probe sensitivity (calibration)", HScale: p.Sensitivity.U / p.Sensitivity.Value,
				HShift: uo / units.Mu0, Note: note}
		}
		u.Records = append(u.Records, r)
	}
	return u, evs, nil
}

// PastDue returns the records past due at t.
func (u *Used) PastDue(t time.Time) []Record {
	if u == nil {
		return nil
	}
	var out []Record
	for _, r := range u.Records {
		if r.PastDue(t) {
			out = append(out, r)
		}
	}
	return out
}

// AddTo adds the records' uncertainties to s.Extra as budget sources (the
// probe's only when H comes from the field meter).
func (u *Used) AddTo(s *process.Setup) {
	if u == nil {
		return
	}
	s.Extra = append(s.Extra, u.sources...)
	if u.probe != nil && s.HFrom == process.HFromFieldMeter {
		s.Extra = append(s.Extra, u.probeU)
	}
}

// Correct returns a copy of raw corrected with the records: integrator, ψ =
// (reading − offset)/gain; then coil, ψ scaled by N2·A_c/(N2·A_c)_cal (A_c
// the fixture's coil area); field meter, B_probe as Probe says. (With no
// record of a kind its factors are 1 and 0, which change no bit.)
func (u *Used) Correct(raw []record.Sample) []record.Sample {
	out := make([]record.Sample, len(raw))
	copy(out, raw)
	if u == nil {
		return out
	}
	for i := range out {
		out[i].Psi = (out[i].Psi - u.off) / u.gain * u.psiK
		if p := u.probe; p != nil {
			var off, alpha float64
			if p.OffsetT != nil {
				off = p.OffsetT.Value
			}
			if p.TempCoeff != nil {
				alpha = p.TempCoeff.Value
			}
			dT := 0.0
			if t := out[i].TempC; !math.IsNaN(t) {
				dT = t - p.RefTempC
			}
			out[i].BProbe = (out[i].BProbe - off) / (p.Sensitivity.Value * (1 + alpha*dT))
		}
	}
	return out
}

// Apply is Use, AddTo and Correct at once: raw corrected with recs, their
// uncertainties added to s.Extra, and an event per record used.
func Apply(raw []record.Sample, recs []Record, fx config.Fixture, s *process.Setup, at time.Time) ([]record.Sample, []Event, error) {
	u, evs, err := Use(recs, fx, at)
	if err != nil {
		return nil, nil, err
	}
	u.AddTo(s)
	return u.Correct(raw), evs, nil
}

// LoadDir reads every `kind: calibration` file (*.yaml, *.yml) of dir;
// files of other kinds are skipped. Two records with one id, or two of one
// target dated the same day (which is in force is then unclear), are
// errors naming both files.
func LoadDir(dir string) ([]Record, error) { return LoadFS(os.DirFS(dir), ".", dir) }

// LoadFS is LoadDir on dir of fsys; errors name files as under shown.
func LoadFS(fsys fs.FS, dir, shown string) ([]Record, error) {
	docs, err := configs.ParseKindDir(fsys, dir, shown, Kind)
	if err != nil {
		return nil, err
	}
	var out []Record
	var es configs.Errors
	ids, targets := map[string]string{}, map[string]string{}
	for _, doc := range docs {
		file := doc.File
		r, err := FromDoc(doc)
		if err != nil {
			return nil, err
		}
		if prev, dup := ids[r.ID]; dup {
			es = append(es, doc.Errorf("id", "%s is also the id of %s", r.ID, prev))
			continue
		}
		ids[r.ID] = file
		key := r.target() + "@" + r.Date
		if prev, dup := targets[key]; dup {
			es = append(es, doc.Errorf("date", "%s has a record of the same date for %s: which one is in force is unclear", prev, r.target()))
			continue
		}
		targets[key] = file
		out = append(out, r)
	}
	if len(es) > 0 {
		return nil, es
	}
	return out, nil
}

// target names what r calibrates: "fixture NAME" or "ROLE IDENTITY".
func (r Record) target() string {
	if r.AppliesTo.Fixture != "" {
		return "fixture " + r.AppliesTo.Fixture
	}
	return r.AppliesTo.Role + " " + r.AppliesTo.Identity
}

// IdentityMatches reports whether a record's identity names the instrument
// that gave reply to *IDN?: their comma-separated fields are equal (spaces
// around each ignored) as far as the record's go, so a record naming maker,
// model and serial holds whatever the firmware field says.
func IdentityMatches(identity, reply string) bool {
	want, got := strings.Split(identity, ","), strings.Split(reply, ",")
	if identity == "" || len(want) > len(got) {
		return false
	}
	for i, w := range want {
		if strings.TrimSpace(w) != strings.TrimSpace(got[i]) {
			return false
		}
	}
	return true
}

// Select picks from recs those for fx: its search coil's (applies_to.fixture
// is fx's name) and each instrument's whose identity matches the *IDN? reply
// its role gave (identities: role → reply). Of several records for one
// target the latest dated is taken (a renewed calibration supersedes the
// one before).
func Select(recs []Record, fx string, identities map[string]string) []Record {
	latest := map[string]Record{}
	var order []string
	for _, r := range recs {
		t := r.AppliesTo
		switch {
		case t.Fixture != "":
			if t.Fixture != fx {
				continue
			}
		case !IdentityMatches(t.Identity, identities[t.Role]):
			continue
		}
		key := r.target()
		prev, seen := latest[key]
		if !seen {
			order = append(order, key)
		}
		if !seen || r.date.After(prev.date) {
			latest[key] = r
		}
	}
	out := make([]Record, 0, len(order))
	for _, k := range order {
		out = append(out, latest[k])
	}
	return out
}
