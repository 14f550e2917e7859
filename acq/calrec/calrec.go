// Package calrec holds calibration records (`kind: calibration`): the
// calibrated values of a search coil (by fixture) or of an instrument (by
// role and identity) with their standard uncertainties, the certificate,
// the calibration date and the date it falls due. Apply corrects raw
// samples with them and returns the budget sources and notes for the run.
package calrec

import (
	"fmt"
	"math"
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

// Event is a note for the run that used the records.
type Event struct {
	Level, Text string
}

// Apply returns a copy of raw corrected with the records (coil: ψ scaled by
// N2·A_c/(N2·A_c)_cal, A_c the fixture's coil area; integrator: ψ = (reading
// − offset)/gain; field meter: B_probe as Probe says), adds their
// uncertainties to s.Extra as budget sources, and returns an event per
// record used (a warning for one past due at `at`). A coil record for
// another fixture, or for a fixture without winding.coil_area_mm2, is an
// error; so are two records of one kind.
func Apply(raw []record.Sample, recs []Record, fx config.Fixture, s *process.Setup, at time.Time) ([]record.Sample, []Event, error) {
	out := make([]record.Sample, len(raw))
	copy(out, raw)
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
		evs = append(evs, Event{"info", "used " + r.Describe()})
		if r.PastDue(at) {
			evs = append(evs, Event{"warn", fmt.Sprintf("calibration %s is past due (due %s): figures rest on an expired calibration", r.ID, r.Due)})
		}
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
			k := float64(fx.Winding.N2) * ac / nac.Value
			for i := range out {
				out[i].Psi *= k
			}
			s.Extra = append(s.Extra, loop.Source{Name: "coil area-turns", BScale: nac.U / nac.Value,
				Note: "Type B: calibration " + r.ID + ", certificate " + r.Certificate})
		case r.Integrator != nil:
			g := r.Integrator.Gain
			off := 0.0
			if o := r.Integrator.OffsetWb; o != nil {
				off = o.Value
			}
			for i := range out {
				out[i].Psi = (out[i].Psi - off) / g.Value
			}
			s.Extra = append(s.Extra, loop.Source{Name: "integrator gain (calibration)", BScale: g.U / g.Value,
				Note: "Type B: calibration " + r.ID + ", certificate " + r.Certificate})
		case r.Probe != nil:
			p := r.Probe
			var off, alpha float64
			if p.OffsetT != nil {
				off = p.OffsetT.Value
			}
			if p.TempCoeff != nil {
				alpha = p.TempCoeff.Value
			}
			for i := range out {
				dT := 0.0
				if t := out[i].TempC; !math.IsNaN(t) {
					dT = t - p.RefTempC
				}
				out[i].BProbe = (out[i].BProbe - off) / (p.Sensitivity.Value * (1 + alpha*dT))
			}
			if s.HFrom == process.HFromFieldMeter {
				var uo float64
				if p.OffsetT != nil {
					uo = p.OffsetT.U
				}
				s.Extra = append(s.Extra, loop.Source{Name: "probe sensitivity (calibration)", HScale: p.Sensitivity.U / p.Sensitivity.Value,
					HShift: uo / units.Mu0, Note: "Type B: calibration " + r.ID + ", certificate " + r.Certificate})
			}
		}
	}
	return out, evs, nil
}
