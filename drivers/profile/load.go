package profile

import (
	"fmt"
	"io/fs"
	"math"
	"os"
	"regexp"
	"sort"
	"strconv"
	"strings"
	"time"

	"hystd/configs"
	"hystd/drivers/instr"
	"hystd/drivers/link"
)

// maxHaltSteps bounds the ramp-down of a supply from full range.
const maxHaltSteps = 100000

// Kind is the value of the top-level kind key of every profile.
const Kind = "instrument-profile"

// roleOps lists, per role, the operations it may have; true marks the
// required ones. Units are the SI unit each operation must declare ("" for
// operations without a value).
var roleOps = map[string]map[string]opRule{
	instr.RoleSupply: {
		OpSetCurrent:  {required: true, unit: "A", numeric: true, set: true, ranged: true},
		OpReadCurrent: {required: true, unit: "A", numeric: true},
		OpReadVoltage: {required: true, unit: "V", numeric: true},
		OpSetOutput:   {required: true, set: true, boolean: true},
		OpReadStatus:  {parse: "int"},
	},
	instr.RoleIntegrator: {
		OpReset:        {required: true, set: true},
		OpSetRange:     {unit: "Wb", numeric: true, set: true, ranged: true},
		OpReadFlux:     {required: true, unit: "Wb", numeric: true},
		OpReadOverload: {parse: "bool"},
	},
	instr.RoleFieldMeter: {
		OpReadField: {required: true, unit: "T", numeric: true},
		OpSetRange:  {unit: "T", numeric: true, set: true, ranged: true},
		OpZero:      {set: true},
	},
	instr.RoleThermometer: {
		OpReadTemperature: {required: true, unit: "°C", numeric: true},
	},
}

type opRule struct {
	required bool
	unit     string
	numeric  bool   // a query giving a number, or a set taking one
	set      bool   // must be a setting (else a query)
	boolean  bool   // a setting taking on/off
	ranged   bool   // a setting whose range is required
	parse    string // the parse kind required, if any
}

var statusBits = map[string]bool{"compliance": true, "overtemp": true, "trip": true, "output": true}

var nameRE = regexp.MustCompile(`^[a-z0-9][a-z0-9-]*$`)

// Load loads and validates a profile. nameOrPath is either a profile name,
// looked up as instruments/NAME.yaml in the embedded configs.Samples, or a
// path to a YAML file (anything containing a "/" or ending in .yaml/.yml).
// Errors name the file, line and key. The returned profile has its
// defaults filled in (Scale 1, Format "%g", Separator ",", 8 data bits,
// parity none, stop bits "1", flow none).
func Load(nameOrPath string) (Profile, error) {
	var (
		data []byte
		err  error
		file = nameOrPath
	)
	if strings.Contains(nameOrPath, "/") || strings.HasSuffix(nameOrPath, ".yaml") || strings.HasSuffix(nameOrPath, ".yml") {
		data, err = os.ReadFile(nameOrPath)
		if err != nil {
			return Profile{}, fmt.Errorf("instrument profile %s: %w", nameOrPath, err)
		}
	} else {
		file = "instruments/" + nameOrPath + ".yaml"
		data, err = fs.ReadFile(configs.Samples, file)
		if err != nil {
			return Profile{}, fmt.Errorf("instrument profile %q: no such profile (shipped: %s)", nameOrPath, strings.Join(Names(), ", "))
		}
	}
	return Parse(file, data)
}

// Names returns the names of the shipped profiles, sorted.
func Names() []string {
	entries, _ := fs.ReadDir(configs.Samples, "instruments")
	var out []string
	for _, e := range entries {
		if n, ok := strings.CutSuffix(e.Name(), ".yaml"); ok {
			out = append(out, n)
		}
	}
	sort.Strings(out)
	return out
}

// Parse decodes and validates a profile from YAML; file names it in errors.
func Parse(file string, data []byte) (Profile, error) {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return Profile{}, err
	}
	return FromDoc(doc)
}

// FromDoc decodes and validates a parsed document (for `hystd check`:
// check.Register(profile.Kind, func(d *configs.Doc) error { _, err := profile.FromDoc(d); return err })).
func FromDoc(doc *configs.Doc) (Profile, error) {
	if k := doc.Kind(); k != Kind {
		return Profile{}, doc.Errorf("kind", "want %q, got %q", Kind, k)
	}
	var p Profile
	if err := doc.Decode(&p); err != nil {
		return Profile{}, err
	}
	if err := validate(p, func(key, format string, args ...any) *configs.Error {
		return doc.Errorf(key, format, args...)
	}); err != nil {
		return Profile{}, err
	}
	return normalize(p), nil
}

// Validate checks a profile that did not come from a file (errors carry
// the profile's name instead of a file and line).
func Validate(p Profile) error {
	return validate(p, func(key, format string, args ...any) *configs.Error {
		return &configs.Error{File: "profile " + p.Name, Key: key, Problem: fmt.Sprintf(format, args...)}
	})
}

type errorf func(key, format string, args ...any) *configs.Error

func validate(p Profile, ef errorf) error {
	var es configs.Errors
	add := func(key, format string, args ...any) { es = append(es, ef(key, format, args...)) }
	validateHead(add, p)
	validateCommands(add, p)
	validateHalt(add, p)
	if rules := roleOps[p.Role]; rules != nil {
		validateOps(add, p, rules)
	}
	validateBuffered(p, add)
	validateRamp(p, add)
	sort.SliceStable(es, func(i, j int) bool { return es[i].Line < es[j].Line })
	return es.Err()
}

// adder reports one problem of a profile at its key.
type adder = func(key, format string, args ...any)

// validateHead checks what says which instrument it is and how to talk to
// it: kind, name, role, serial line, terminators, timeout and identity.
func validateHead(add adder, p Profile) {
	if p.Kind != Kind {
		add("kind", "want %q, got %q", Kind, p.Kind)
	}
	if !nameRE.MatchString(p.Name) {
		add("name", "%q: want lower-case letters, digits and dashes", p.Name)
	}
	if _, ok := roleOps[p.Role]; !ok {
		add("role", "%q: want one of supply, integrator, field_meter, thermometer", p.Role)
	}
	if err := p.LineSettings().Check(); err != nil {
		for _, e := range strings.Split(err.Error(), "\n") {
			add("serial", "%s", e)
		}
	}
	checkTerm(add, "terminators.write", p.Terminators.Write)
	checkTerm(add, "terminators.read", p.Terminators.Read)
	checkDur(add, "timeout", p.Timeout, true)
	if q := p.QueuedQueries; q != nil && (*q < 1 || *q > MaxQueued) {
		add("queued_queries", "%d: want 1 to %d (how many queries the instrument answers in order before its first reply is read)", *q, MaxQueued)
	}
	if strings.TrimSpace(p.Identity) == "" {
		add("identity", "required: a text the *IDN? reply must contain")
	}
}

func checkTerm(add adder, key, t string) {
	switch {
	case t == "":
		add(key, "required, e.g. \"\\n\" or \"\\r\\n\"")
	case len(t) > 4:
		add(key, "%q: at most 4 bytes", t)
	case strings.ContainsAny(t, "{}"):
		add(key, "%q: must not contain braces", t)
	}
}

// validateCommands checks the fixed commands (init, safe state), the
// resynchronization query and the error polling.
func validateCommands(add adder, p Profile) {
	for i, c := range p.Init {
		if strings.TrimSpace(c) == "" || strings.Contains(c, "{}") {
			add(fmt.Sprintf("init.%d", i), "%q: want a command without placeholder", c)
		}
	}
	for i, c := range p.SafeState {
		if strings.TrimSpace(c) == "" || strings.Contains(c, "{}") {
			add(fmt.Sprintf("safe_state.%d", i), "%q: want a command without placeholder", c)
		}
	}
	if p.SyncQuery != "" && strings.TrimSpace(p.SyncReply) == "" {
		add("sync_reply", "required with sync_query: a text its reply always contains and no reading can")
	}
	if p.ErrorPoll != "" && p.ErrorPoll != "off" {
		checkDur(add, "error_poll", p.ErrorPoll, false)
	}
	for k, v := range p.ErrorSeverity {
		if _, _, err := parseCodeRange(k); err != nil {
			add("error_severity."+k, "%v", err)
		}
		if v != SeverityWarn && v != SeverityFail {
			add("error_severity."+k, "%q: want warn or fail", v)
		}
	}
}

// validateHalt checks what only a supply has: how it is brought to zero
// current (halt ramp, safe state) and how a trip is cleared.
func validateHalt(add adder, p Profile) {
	if p.TripClear != "" && p.Role != instr.RoleSupply {
		add("trip_clear", "only for a supply")
	}
	if p.Role != instr.RoleSupply {
		if p.HaltSlew != 0 {
			add("halt_slew_a_per_s", "only for a supply")
		}
		if p.HaltPeriod != "" {
			add("halt_period", "only for a supply")
		}
		return
	}
	if !(p.HaltSlew > 0) || math.IsInf(p.HaltSlew, 0) {
		add("halt_slew_a_per_s", "required for a supply: a positive slew rate in A/s")
	}
	checkDur(add, "halt_period", p.HaltPeriod, true)
	if per, err := time.ParseDuration(p.HaltPeriod); err == nil && per > 0 && p.HaltSlew > 0 {
		if r := p.Operations[OpSetCurrent].Range; len(r) == 2 {
			full := math.Max(math.Abs(r[0]), math.Abs(r[1]))
			if steps := full / (p.HaltSlew * per.Seconds()); steps > maxHaltSteps {
				add("halt_slew_a_per_s", "%g A/s in steps of %s needs %.0f steps to ramp down from %g A; at most %d", p.HaltSlew, p.HaltPeriod, steps, full, maxHaltSteps)
			}
		}
	}
	if len(p.SafeState) == 0 {
		add("safe_state", "required for a supply: the commands that leave it at zero current, output off")
	}
}

// validateOps checks that the role's required operations are given and
// that each operation given is one of the role's, as its rule says.
func validateOps(add adder, p Profile, rules map[string]opRule) {
	names := make([]string, 0, len(rules))
	for n := range rules {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		if _, ok := p.Operations[n]; !ok && rules[n].required {
			add("operations", "%s: required for %s", n, article(p.Role))
		}
	}
	ops := make([]string, 0, len(p.Operations))
	for n := range p.Operations {
		ops = append(ops, n)
	}
	sort.Strings(ops)
	for _, n := range ops {
		r, ok := rules[n]
		if !ok {
			add("operations."+n, "not an operation of %s (known: %s)", article(p.Role), strings.Join(names, ", "))
			continue
		}
		validateOp(add, "operations."+n, p.Operations[n], r)
	}
}

func checkDur(add adder, key, v string, required bool) {
	if v == "" {
		if required {
			add(key, "required: a duration with a unit, e.g. \"500ms\"")
		}
		return
	}
	d, err := time.ParseDuration(v)
	if err != nil {
		add(key, "%q is not a duration (use a unit: ms, s)", v)
	} else if d <= 0 {
		add(key, "%q: must be positive", v)
	}
}

var verbRE = regexp.MustCompile(`%[-+ 0#]*[0-9]*(\.[0-9]+)?([eEfFgGd])`)

func validateOp(add adder, key string, o Operation, r opRule) {
	if !validateOpForm(add, key, o, r) {
		return
	}
	validateOpValue(add, key, o, r)
	validateOpTiming(add, key, o)
	if o.Set != "" {
		validateSetting(add, key, o, r)
		return
	}
	kind := validateParse(add, key, o, r)
	validateReply(add, key, o, kind)
}

// validateOpForm checks that the operation is the setting or the query its
// rule asks for; false when it is not (nothing more is checked).
func validateOpForm(add adder, key string, o Operation, r opRule) bool {
	if (o.Set == "") == (o.Query == "") {
		add(key, "give exactly one of set and query")
		return false
	}
	if r.set && o.Set == "" {
		add(key, "must be a setting (set:)")
		return false
	}
	if !r.set && o.Query == "" {
		add(key, "must be a query (query:)")
		return false
	}
	return true
}

// validateOpValue checks the value's unit, scale, range and accuracy.
func validateOpValue(add adder, key string, o Operation, r opRule) {
	if r.unit != "" && o.Unit != r.unit {
		add(key+".unit", "%q: want %q", o.Unit, r.unit)
	}
	if r.unit == "" && o.Unit != "" && !r.numeric {
		add(key+".unit", "this operation has no value")
	}
	if o.Scale != 0 && (math.IsNaN(o.Scale) || math.IsInf(o.Scale, 0)) {
		add(key+".scale", "must be a finite non-zero number")
	}
	if o.Range != nil {
		if len(o.Range) != 2 {
			add(key+".range", "want [min, max]")
		} else if !(o.Range[0] < o.Range[1]) {
			add(key+".range", "min %g must be below max %g", o.Range[0], o.Range[1])
		}
	} else if r.ranged {
		add(key+".range", "required: [min, max] in %s; setpoints outside are rejected", r.unit)
	}
	if o.Accuracy != nil && (o.Accuracy.Gain < 0 || o.Accuracy.Offset < 0) {
		add(key+".accuracy", "gain and offset must not be negative")
	}
}

// validateOpTiming checks the settle time and the polling until done.
func validateOpTiming(add adder, key string, o Operation) {
	checkDur(add, key+".settle", o.Settle, false)
	checkDur(add, key+".poll_period", o.PollPeriod, false)
	checkDur(add, key+".poll_timeout", o.PollTimeout, false)
	if (o.Poll == "") != (o.PollDone == "") {
		add(key, "poll and poll_done go together")
	}
}

// validateSetting checks a setting: its placeholder, its map and its format.
func validateSetting(add adder, key string, o Operation, r opRule) {
	n := strings.Count(o.Set, "{}")
	switch {
	case n > 1:
		add(key+".set", "%q: at most one {}", o.Set)
	case (r.numeric || r.boolean) && n == 0:
		add(key+".set", "%q: needs {} where the value goes", o.Set)
	case !r.numeric && !r.boolean && n == 1:
		add(key+".set", "%q: this operation takes no value; remove {}", o.Set)
	}
	if o.Parse != "" {
		add(key+".parse", "only for queries")
	}
	if r.boolean {
		if o.Map["true"] == "" || o.Map["false"] == "" {
			add(key+".map", "needs \"true\" and \"false\" entries")
		}
		return
	}
	if !r.numeric {
		return
	}
	if o.Format != "" {
		if m := verbRE.FindAllString(o.Format, -1); len(m) != 1 || strings.Count(o.Format, "%") != 1 {
			add(key+".format", "%q: want one number verb such as %%g, %%.6E, %%+.3f, %%d", o.Format)
		}
	}
	for k := range o.Map {
		if _, err := strconv.ParseFloat(k, 64); err != nil {
			add(key+".map", "key %q: for a numeric setting the keys are the allowed values", k)
		}
	}
}

// validateParse checks a query's parse: and returns its kind (number,
// number-unit, field, bool, int, enum; as written when unknown).
func validateParse(add adder, key string, o Operation, r opRule) string {
	kind := o.Parse
	if f, ok := strings.CutPrefix(o.Parse, "field:"); ok {
		kind = "field"
		if n, err := strconv.Atoi(f); err != nil || n < 1 {
			add(key+".parse", "%q: want field:N with N ≥ 1", o.Parse)
		}
	}
	switch kind {
	case "number", "number-unit", "field":
		if !r.numeric {
			add(key+".parse", "%q: this operation does not return a number", o.Parse)
		}
	case "bool", "int", "enum":
		if r.numeric {
			add(key+".parse", "%q: this operation returns a number (number, number-unit or field:N)", o.Parse)
		}
	case "":
		add(key+".parse", "required: number, number-unit, field:N, bool, int or enum")
	default:
		add(key+".parse", "%q: want number, number-unit, field:N, bool, int or enum", o.Parse)
	}
	if r.parse != "" && kind != r.parse && kind != "" {
		add(key+".parse", "%q: want %s", o.Parse, r.parse)
	}
	return kind
}

// validateReply checks the keys that say how a query's reply of the given
// parse kind is read: map, suffixes, separator, bits; and that it has no
// format (a setting's).
func validateReply(add adder, key string, o Operation, kind string) {
	if kind == "bool" && o.Map != nil {
		for k, v := range o.Map {
			if v != "true" && v != "false" {
				add(key+".map", "%q: %q: want \"true\" or \"false\"", k, v)
			}
		}
	}
	if kind == "enum" && len(o.Map) == 0 {
		add(key+".map", "required for parse: enum")
	}
	if kind == "number-unit" {
		for s, f := range o.Suffixes {
			if !(f > 0) || math.IsInf(f, 0) {
				add(key+".suffixes", "%q: factor must be positive", s)
			}
		}
	} else if o.Suffixes != nil {
		add(key+".suffixes", "only for parse: number-unit")
	}
	if o.Separator != "" && kind != "field" {
		add(key+".separator", "only for parse: field:N")
	}
	validateBits(add, key, o, kind)
	if o.Format != "" {
		add(key+".format", "only for settings")
	}
}

// validateBits checks the status bits of an int reply.
func validateBits(add adder, key string, o Operation, kind string) {
	if len(o.Bits) == 0 {
		return
	}
	if kind != "int" {
		add(key+".bits", "only for parse: int")
	}
	for b, n := range o.Bits {
		if !statusBits[b] {
			add(key+".bits", "%q: want compliance, overtemp, trip or output", b)
		}
		if n < 0 || n > 62 {
			add(key+".bits", "%q: bit %d out of 0..62", b, n)
		}
	}
}

// normalize fills in defaults.
func normalize(p Profile) Profile {
	if p.Serial.DataBits == 0 {
		p.Serial.DataBits = 8
	}
	if p.Serial.Parity == "" {
		p.Serial.Parity = "none"
	}
	if p.Serial.StopBits == "" {
		p.Serial.StopBits = "1"
	}
	if p.Serial.Flow == "" {
		p.Serial.Flow = "none"
	}
	if p.SyncQuery == "" {
		p.SyncQuery, p.SyncReply = "*IDN?", p.Identity
	}
	if p.ErrorPoll == "" {
		p.ErrorPoll = "1s"
	}
	if p.Role == instr.RoleSupply && p.TripClear == "" {
		p.TripClear = "remove the cause, then clear the trip at the supply (its front panel or its reset command) before the next run"
	}
	ops := make(map[string]Operation, len(p.Operations))
	for n, o := range p.Operations {
		if o.Scale == 0 {
			o.Scale = 1
		}
		if o.Set != "" && o.Format == "" && strings.Contains(o.Set, "{}") {
			o.Format = "%g"
		}
		if strings.HasPrefix(o.Parse, "field:") && o.Separator == "" {
			o.Separator = ","
		}
		if o.Poll != "" {
			if o.PollPeriod == "" {
				o.PollPeriod = "50ms"
			}
			if o.PollTimeout == "" {
				o.PollTimeout = "30s"
			}
		}
		ops[n] = o
	}
	p.Operations = ops
	return p
}

// MaxQueued is the largest queued_queries a profile may declare: enough
// for all of one sample's reads of a supply (current, voltage, status).
const MaxQueued = 4

// Queued is how many queries the instrument accepts before its first
// reply is read (queued_queries; 1 when absent).
func (p Profile) Queued() int {
	if p.QueuedQueries == nil {
		return 1
	}
	return *p.QueuedQueries
}

// LineSettings returns the profile's serial settings for drivers/link, with
// the reply timeout as the read timeout. Modem lines are driven only when
// the profile sets dtr or rts.
func (p Profile) LineSettings() link.Settings {
	d, _ := time.ParseDuration(p.Timeout)
	return link.Settings{
		Baud: p.Serial.Baud, DataBits: p.Serial.DataBits, Parity: p.Serial.Parity,
		StopBits: p.Serial.StopBits, Flow: p.Serial.Flow, ReadTimeout: d,
		DTR: p.Serial.DTR, RTS: p.Serial.RTS,
	}
}

// AccuracyOf returns the accuracy figures of an operation, for the
// uncertainty budget; ok is false when the profile gives none.
func (p Profile) AccuracyOf(op string) (a Accuracy, ok bool) {
	o, found := p.Operations[op]
	if !found || o.Accuracy == nil {
		return Accuracy{}, false
	}
	return *o.Accuracy, true
}

// ReadAccuracy returns the accuracy of the profile's main reading, for the
// uncertainty budget: read_current for a supply, read_flux for an
// integrator, read_field for a field meter. ok is false for other roles or
// when the profile gives none.
func (p Profile) ReadAccuracy() (a Accuracy, ok bool) {
	switch p.Role {
	case instr.RoleSupply:
		return p.AccuracyOf(OpReadCurrent)
	case instr.RoleIntegrator:
		return p.AccuracyOf(OpReadFlux)
	case instr.RoleFieldMeter:
		return p.AccuracyOf(OpReadField)
	}
	return Accuracy{}, false
}

// U returns the expanded (k = 2) uncertainty of a reading v: Gain·|v| + Offset.
func (a Accuracy) U(v float64) float64 { return a.Gain*math.Abs(v) + a.Offset }

func article(role string) string {
	if strings.IndexByte("aeiou", role[0]) >= 0 {
		return "an " + role
	}
	return "a " + role
}
