package sim

import (
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"

	"hystd/configs"
	"hystd/drivers/instr"
	"hystd/drivers/profile"
	"hystd/drivers/sim/physics"
)

var defaultProfiles = map[string]string{
	instr.RoleSupply:      "sim-supply",
	instr.RoleIntegrator:  "sim-integrator",
	instr.RoleFieldMeter:  "sim-fieldmeter",
	instr.RoleThermometer: "sim-thermometer",
}

// simulated lists, per role, the profile operations the bench implements.
var simulated = map[string][]string{
	instr.RoleSupply:      {profile.OpSetCurrent, profile.OpReadCurrent, profile.OpReadVoltage, profile.OpSetOutput, profile.OpReadStatus},
	instr.RoleIntegrator:  {profile.OpReset, profile.OpSetRange, profile.OpReadFlux, profile.OpReadOverload},
	instr.RoleFieldMeter:  {profile.OpReadField, profile.OpSetRange, profile.OpZero},
	instr.RoleThermometer: {profile.OpReadTemperature},
}

// Config is a bench file (kind: bench): which instruments are served with
// which profile, the physics of the fixture and specimen, and the faults to
// inject. Load it with LoadBench or ParseBench; a Config from either is
// validated and has its profiles resolved.
type Config struct {
	Kind        string `yaml:"kind"` // "bench"
	Name        string `yaml:"name"`
	Description string `yaml:"description"`
	// Seed seeds every random draw (noise, random faults): one seed, one run.
	Seed uint64 `yaml:"seed"`
	// Step is the physics time step (default 1ms, at most 10ms).
	Step configs.Duration `yaml:"step"`
	// History is how many truth samples (one per step) the bench keeps for
	// tests (default 200000, the oldest are dropped).
	History int `yaml:"history"`
	// Instruments maps a role to the profile it is served with. Missing:
	// all four roles with the sim-* profiles.
	Instruments map[string]InstrumentConfig `yaml:"instruments"`

	physics.RigParams `yaml:",inline"`

	Faults []Fault `yaml:"faults"`

	profiles map[string]profile.Profile
}

// InstrumentConfig names the profile of one served role: a profile name in
// configs/instruments, or a path to a profile file (relative to the bench
// file's folder).
type InstrumentConfig struct {
	Profile string `yaml:"profile"`
}

// Fault is one injected fault. Exactly one trigger is given: At (bench time
// since start), AfterCommands (the n-th command line the role receives) or
// Probability (per command line, drawn from the bench seed). Times caps how
// often it fires: default 1 for At and AfterCommands, unlimited for
// Probability. Reply faults (drop, delay, garble) arm at the trigger and
// spoil the next reply; hangup, error and trip act at once.
type Fault struct {
	Role          string            `yaml:"role"`
	Kind          string            `yaml:"kind"` // drop | delay | garble | hangup | error | trip
	At            *configs.Duration `yaml:"at"`
	AfterCommands int               `yaml:"after_commands"`
	Probability   float64           `yaml:"probability"`
	Times         int               `yaml:"times"`
	Delay         configs.Duration  `yaml:"delay"`   // kind late_trigger: the trigger's lag; kind delay: how long the reply is held (in simulated time, up to 3× the profile timeout: until the next command line, see lateWithin)
	Code          int               `yaml:"code"`    // kind error: SCPI code (default -300)
	Message       string            `yaml:"message"` // kind error (default "Device-specific error")
}

// Fault kinds.
const (
	FaultDrop   = "drop"
	FaultDelay  = "delay"
	FaultGarble = "garble"
	FaultHangup = "hangup"
	FaultError  = "error"
	FaultTrip   = "trip"
)

// LoadBench reads and validates a bench file. Errors name the file, line
// and key ("bench.yaml:12: specimen.jiles_atherton.k_a_m: must be > 0").
func LoadBench(path string) (Config, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return Config{}, fmt.Errorf("bench: %w", err)
	}
	return ParseBench(path, data)
}

// ParseBench parses and validates a bench given as bytes; file names it in
// errors, and profiles given as paths are read relative to file's folder.
func ParseBench(file string, data []byte) (Config, error) {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return Config{}, err
	}
	return BenchFrom(doc)
}

// DefaultBench returns the demo bench (configs/bench-demo.yaml, embedded):
// a non-oriented steel ring, 50/40/10 mm on the mean path, N1 200, N2 100,
// matching configs/fixture-ring-bench.yaml and configs/specimen-ring-r17.yaml.
func DefaultBench() (Config, error) {
	data, err := configs.Samples.ReadFile("bench-demo.yaml")
	if err != nil {
		return Config{}, fmt.Errorf("bench: embedded demo bench: %w", err)
	}
	return ParseBench("bench-demo.yaml", data)
}

// BenchFrom decodes and validates a parsed bench document (for `hystd
// check`): every problem found is returned, as configs.Errors.
func BenchFrom(doc *configs.Doc) (Config, error) {
	var c Config
	if err := doc.Decode(&c); err != nil {
		return Config{}, err
	}
	var es configs.Errors
	if c.Kind != "bench" {
		es = append(es, doc.Errorf("kind", "must be \"bench\", got %q", c.Kind))
	}
	if c.Step == 0 {
		c.Step = configs.Duration(defaultStep)
	}
	if c.Step.D() <= 0 || c.Step.D() > maxStep {
		es = append(es, doc.Errorf("step", "must be within (0, %v], got %v", maxStep, c.Step.D()))
	}
	if c.History == 0 {
		c.History = 200000
	}
	if c.History < 0 || c.History > 10000000 {
		es = append(es, doc.Errorf("history", "must be within 1..10000000, got %d", c.History))
	}
	if err := c.RigParams.Validate(); err != nil {
		key, problem, _ := strings.Cut(err.Error(), ": ")
		es = append(es, doc.Errorf(key, "%s", problem))
	}
	if len(c.Instruments) == 0 {
		c.Instruments = map[string]InstrumentConfig{}
		for r, p := range defaultProfiles {
			c.Instruments[r] = InstrumentConfig{Profile: p}
		}
	}
	c.profiles = map[string]profile.Profile{}
	for _, role := range sortedKeys(c.Instruments) {
		ic := c.Instruments[role]
		key := "instruments." + role
		if _, ok := simulated[role]; !ok {
			es = append(es, doc.Errorf(key, "unknown role (known: supply, integrator, field_meter, thermometer)"))
			continue
		}
		if ic.Profile == "" {
			ic.Profile = defaultProfiles[role]
		}
		p, err := loadProfile(ic.Profile, filepath.Dir(doc.File))
		if err != nil {
			es = append(es, doc.Errorf(key+".profile", "%v", err))
			continue
		}
		if p.Role != role {
			es = append(es, doc.Errorf(key+".profile", "profile %q is for role %s, not %s", p.Name, p.Role, role))
			continue
		}
		if err := checkProfile(p); err != nil {
			es = append(es, doc.Errorf(key+".profile", "profile %q: %v", p.Name, err))
			continue
		}
		c.profiles[role] = p
	}
	for i, f := range c.Faults {
		if err := f.check(c.Instruments); err != nil {
			key, problem, _ := strings.Cut(err.Error(), ": ")
			es = append(es, doc.Errorf(fmt.Sprintf("faults.%d.%s", i, key), "%s", problem))
		}
	}
	if err := es.Err(); err != nil {
		return Config{}, err
	}
	return c, nil
}

// loadProfile loads a profile with profile.Load: a name among the shipped
// profiles, or a path (a value with a slash or ending in .yaml), relative to
// the bench file's folder.
func loadProfile(ref, dir string) (profile.Profile, error) {
	if (strings.ContainsRune(ref, '/') || strings.HasSuffix(ref, ".yaml") || strings.HasSuffix(ref, ".yml")) && !filepath.IsAbs(ref) {
		ref = filepath.Join(dir, ref)
		if !strings.ContainsRune(ref, '/') {
			ref = "./" + ref
		}
	} else if !filepath.IsAbs(ref) && !slices.Contains(profile.Names(), ref) {
		return profile.Profile{}, fmt.Errorf("no profile named %q in configs/instruments", ref)
	}
	return profile.Load(ref)
}

// checkProfile refuses a profile with an operation the bench cannot serve.
func checkProfile(p profile.Profile) error {
	known := map[string]bool{}
	for _, op := range simulated[p.Role] {
		known[op] = true
	}
	for _, name := range sortedKeys(p.Operations) {
		op := p.Operations[name]
		if !known[name] {
			return fmt.Errorf("operation %q is not simulated for role %s", name, p.Role)
		}
		if (op.Set == "") == (op.Query == "") {
			return fmt.Errorf("operation %q: give exactly one of set and query", name)
		}
	}
	return nil
}

func (f Fault) check(instruments map[string]InstrumentConfig) error {
	if _, ok := instruments[f.Role]; !ok {
		return fmt.Errorf("role: %q is not served by this bench", f.Role)
	}
	switch f.Kind {
	case FaultDrop, FaultGarble, FaultHangup, FaultError:
	case FaultDelay:
		if f.Delay.D() <= 0 {
			return fmt.Errorf("delay: must be > 0 for kind delay")
		}
	case FaultTrip:
		if f.Role != instr.RoleSupply {
			return fmt.Errorf("kind: trip is a supply fault, not %s", f.Role)
		}
	case FaultNoTrigger, FaultShortBuffer, FaultLateTrigger:
		if f.Kind == FaultLateTrigger && f.Delay.D() <= 0 {
			return fmt.Errorf("delay: must be > 0 for kind late_trigger")
		}
		if _, ok := clockDrift[f.Role]; !ok {
			return fmt.Errorf("kind: %s is a fault of a timed acquisition (integrator, field meter), not %s", f.Kind, f.Role)
		}
	default:
		return fmt.Errorf("kind: must be drop, delay, garble, hangup, error, trip, no_trigger, short_buffer or late_trigger, got %q", f.Kind)
	}
	n := 0
	if f.At != nil {
		n++
		if f.At.D() < 0 {
			return fmt.Errorf("at: must be >= 0")
		}
	}
	if f.AfterCommands != 0 {
		n++
		if f.AfterCommands < 0 {
			return fmt.Errorf("after_commands: must be > 0")
		}
	}
	if f.Probability != 0 {
		n++
		if !(f.Probability > 0 && f.Probability <= 1) {
			return fmt.Errorf("probability: must be within (0, 1]")
		}
	}
	if n != 1 {
		return fmt.Errorf("at: give exactly one trigger of at, after_commands and probability")
	}
	if f.Times < 0 {
		return fmt.Errorf("times: must be >= 0")
	}
	if f.Kind == FaultError && f.Code != 0 && (f.Code > -100 || f.Code < -999) && f.Code <= 0 {
		return fmt.Errorf("code: SCPI error codes are -999..-100 or positive, got %d", f.Code)
	}
	return nil
}

// Profiles returns the profile name served for each role.
func (c Config) Profiles() map[string]string {
	out := map[string]string{}
	for r, p := range c.profiles {
		out[r] = p.Name
	}
	return out
}

func sortedKeys[V any](m map[string]V) []string {
	ks := make([]string, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	sort.Strings(ks)
	return ks
}
