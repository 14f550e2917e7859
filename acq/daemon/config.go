package daemon

import (
	"fmt"
	"net"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/viper"

	"hystd/acq/api"
	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/influx"
	"hystd/acq/recipe"
	"hystd/configs"
)

// Kind is the value of `kind:` in a daemon config file.
const Kind = "daemon"

// DefaultAddr is where the HTTP API listens when the config names no address.
const DefaultAddr = api.DefaultAddr

// Values of calibration_past_due.
const (
	PastDueWarn   = "warn"
	PastDueRefuse = "refuse"
)

// DefaultPoll is how often a watched folder is looked at.
const DefaultPoll = 2 * time.Second

// Config is a daemon config file (`kind: daemon`). Relative paths are taken
// from the config file's folder.
type Config struct {
	Kind string `yaml:"kind"`
	HTTP struct {
		Addr string `yaml:"addr"` // host:port; default 127.0.0.1:8740
		// TokenFile holds the bearer token that mutations (submit, abort)
		// need; empty: mutations are refused.
		TokenFile string `yaml:"token_file"`
		// UsersFile names users with their own tokens and roles (review,
		// operate, admin; `kind: users`, api.LoadUsers); each mutation is
		// recorded with the user's name. It may stand beside token_file,
		// whose token then acts as api.SharedTokenUser with role admin.
		UsersFile string `yaml:"users_file"`
		// Hosts are names (besides the bound address) the API may be reached
		// by; a request with any other Host header is refused (DNS rebinding).
		Hosts []string `yaml:"hosts"`
		// OpenWithoutToken must be true to listen on an address other
		// machines reach without a token_file: everything stored (raw
		// samples, config snapshots) is then readable from the network.
		OpenWithoutToken bool `yaml:"open_without_token"`
	} `yaml:"http"`
	Store struct {
		Path string `yaml:"path"` // SQLite file, the record of truth
	} `yaml:"store"`
	// Influx, when given, forwards every stored loop to an InfluxDB-v2-compatible server.
	Influx *influx.Config `yaml:"influx"`
	Log    struct {
		Level  string `yaml:"level"`  // debug | info (default) | warn | error
		Format string `yaml:"format"` // text (default) | json
	} `yaml:"log"`
	// SpoolDir keeps loops the store refused during a run; default: beside the store.
	SpoolDir string `yaml:"spool_dir"`
	// Specimens is a folder of `kind: specimen` files: the registry from
	// which a run names its specimen by id (run --specimen, POST
	// ?specimen=, a recipe's specimen: key). Optional.
	Specimens string `yaml:"specimens"`
	// Grades is a folder of `kind: grade` files; a specimen's grade: names
	// one of them, and every loop is judged against it. Optional.
	Grades string `yaml:"grades"`
	// Calibrations is a folder of `kind: calibration` records. A run uses
	// those for its fixture's search coil and for the instruments it finds
	// there (by their *IDN? reply), the latest dated of each. Optional.
	Calibrations string `yaml:"calibrations"`
	// CalibrationPastDue is what a run does when a calibration it would
	// use is past due: warn (default; a warning event with the run) or
	// refuse (the run ends before any current flows).
	CalibrationPastDue string `yaml:"calibration_past_due"`
	// DecisionRule overrides the grades' own decision rule: guarded-U or simple. Optional.
	DecisionRule string `yaml:"decision_rule"`
	// ConfirmMount makes a queued run whose specimen differs from the one on
	// the fixture wait until someone confirms the specimen mounted (API
	// POST /api/v1/runs/{id}/mount, or the review page). Default false.
	ConfirmMount bool           `yaml:"confirm_mount"`
	Fixtures     []FixtureEntry `yaml:"fixtures"`
}

// FixtureEntry is one fixture this daemon drives.
type FixtureEntry struct {
	Fixture  string `yaml:"fixture"`  // fixture file
	Specimen string `yaml:"specimen"` // specimen file: what is mounted now
	// Watch is a folder of recipe files: each new file is validated, queued,
	// run, then moved to done/ or failed/ with a result file beside it.
	Watch    string           `yaml:"watch"`
	Poll     configs.Duration `yaml:"poll"` // default 2s
	Schedule []ScheduleEntry  `yaml:"schedule"`
}

// ScheduleEntry runs a recipe every day at a local time.
type ScheduleEntry struct {
	At     string   `yaml:"at"`     // "HH:MM", local time of the daemon
	Days   []string `yaml:"days"`   // mon … sun; empty: every day
	Recipe string   `yaml:"recipe"` // recipe file
}

// Loaded is a validated config with every file it names read and checked.
// It is immutable: a reload builds a new one.
type Loaded struct {
	File     string
	Config   Config
	Fixtures []LoadedFixture
	TokenSet bool // a token file or a users file was given and read
	// Registry holds the specimens and grades the config names.
	Registry Registry
	// Calibrations are the records of the calibrations folder.
	Calibrations []calrec.Record
	token        string
	users        []api.Credential
	LoadedAt     time.Time
}

// LoadedFixture is one fixture entry with its files parsed.
type LoadedFixture struct {
	Name     string
	Fixture  config.Fixture
	Specimen config.Specimen
	Geometry recipe.Geometry
	Watch    string
	Poll     time.Duration
	Schedule []Scheduled
}

// Scheduled is a schedule entry with its recipe parsed and checked against the fixture.
type Scheduled struct {
	Hour, Minute int
	Days         map[time.Weekday]bool // nil: every day
	RecipeFile   string
	Recipe       *recipe.Recipe
}

// envKeys are the settings an environment variable HYSTD_<KEY> (dots as
// underscores, upper case) may override, e.g. HYSTD_HTTP_ADDR.
var envKeys = []string{"http.addr", "http.token_file", "http.users_file", "store.path", "log.level", "log.format", "spool_dir",
	"influx.url", "influx.org", "influx.bucket", "influx.token_file"}

// Load reads, overrides from the environment and validates a daemon config
// and every file it names. Every problem is reported as FILE:LINE: key: problem.
func Load(path string) (*Loaded, error) {
	data, err := configs.ReadFile(path)
	if err != nil {
		return nil, err
	}
	return Parse(path, data)
}

// Parse is Load on data as if read from file. Relative paths are taken from
// file's folder; HYSTD_* environment variables override the file.
func Parse(file string, data []byte) (*Loaded, error) {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return nil, err
	}
	return FromDoc(doc)
}

// FromDoc validates a parsed daemon document.
func FromDoc(doc *configs.Doc) (*Loaded, error) {
	var c Config
	if err := doc.Decode(&c); err != nil {
		return nil, err
	}
	ce := &cerr{doc: doc, env: map[string]string{}}
	overrideFromEnv(&c, ce)
	base := filepath.Dir(doc.File)
	ld := &loader{c: &c, ce: ce, l: &Loaded{File: doc.File}, abs: func(p string) string {
		if p == "" || filepath.IsAbs(p) {
			return p
		}
		return filepath.Join(base, p)
	}}
	if c.Kind != Kind {
		ce.add("kind", "must be %q, got %q", Kind, c.Kind)
	}
	ld.http()
	ld.store()
	ld.log()
	ld.influx()
	ld.l.Registry = loadRegistry(ce, ld.abs(c.Specimens), ld.abs(c.Grades), c.DecisionRule)
	ld.calibrations()
	ld.fixtures()
	if err := ce.es.Err(); err != nil {
		return nil, err
	}
	ld.l.Config = c
	return ld.l, nil
}

// loader is one FromDoc under way: the config it completes (defaults,
// absolute paths), the problems found so far and what it has loaded. Its
// methods take the config's sections in order.
type loader struct {
	c   *Config
	ce  *cerr
	l   *Loaded
	abs func(string) string // a path relative to the config file's folder made absolute
}

// http checks the HTTP section: the address, the token and users files,
// the exposure without a token and the extra host names.
func (ld *loader) http() {
	c, ce, l := ld.c, ld.ce, ld.l
	if c.HTTP.Addr == "" {
		c.HTTP.Addr = DefaultAddr
	}
	if _, port, err := net.SplitHostPort(c.HTTP.Addr); err != nil {
		ce.add("http.addr", "%q is not host:port: %v", c.HTTP.Addr, err)
	} else if n, err := strconv.Atoi(port); err != nil || n < 0 || n > 65535 {
		ce.add("http.addr", "port %q is not a number 0–65535", port)
	}
	if c.HTTP.TokenFile != "" {
		c.HTTP.TokenFile = ld.abs(c.HTTP.TokenFile)
		b, err := os.ReadFile(c.HTTP.TokenFile)
		tok := strings.TrimSpace(string(b))
		switch {
		case err != nil:
			ce.add("http.token_file", "%v", err)
		case len(tok) < 16 || strings.ContainsAny(tok, " \t\r\n"):
			ce.add("http.token_file", "%s must hold one token of at least 16 characters and no spaces", c.HTTP.TokenFile)
		default:
			l.token, l.TokenSet = tok, true
		}
	}
	if c.HTTP.UsersFile != "" {
		c.HTTP.UsersFile = ld.abs(c.HTTP.UsersFile)
		users, err := api.LoadUsers(c.HTTP.UsersFile)
		if err != nil {
			ce.add("http.users_file", "%v", err)
		}
		l.users = users
		l.TokenSet = true
	}
	if !api.IsLoopback(c.HTTP.Addr) && c.HTTP.TokenFile == "" && c.HTTP.UsersFile == "" && !c.HTTP.OpenWithoutToken {
		ce.add("http.addr", "%s is reachable from other machines and no http.token_file is set: every stored run (raw samples, config snapshots) would be readable from the network; set http.token_file, listen on 127.0.0.1, or set http.open_without_token: true to accept that", c.HTTP.Addr)
	}
	for i, h := range c.HTTP.Hosts {
		if h == "" || strings.ContainsAny(h, ":/ \t") {
			ce.add(fmt.Sprintf("http.hosts.%d", i), "%q: want a host name without port or scheme, e.g. hystd.lab.example", h)
		}
	}
}

// store checks the store path and puts the spool folder beside the store
// when none is named.
func (ld *loader) store() {
	c := ld.c
	if c.Store.Path == "" {
		ld.ce.add("store.path", "required: the SQLite file runs are stored in")
	}
	c.Store.Path = ld.abs(c.Store.Path)
	if c.SpoolDir == "" && c.Store.Path != "" {
		c.SpoolDir = filepath.Join(filepath.Dir(c.Store.Path), "spool")
	}
	c.SpoolDir = ld.abs(c.SpoolDir)
}

// log checks the log level and format, with their defaults.
func (ld *loader) log() {
	c, ce := ld.c, ld.ce
	switch c.Log.Level {
	case "":
		c.Log.Level = "info"
	case "debug", "info", "warn", "error":
	default:
		ce.add("log.level", "must be debug, info, warn or error, got %q", c.Log.Level)
	}
	switch c.Log.Format {
	case "":
		c.Log.Format = "text"
	case "text", "json":
	default:
		ce.add("log.format", "must be text or json, got %q", c.Log.Format)
	}
}

// influx checks the forwarder's section, when there is one, with its defaults.
func (ld *loader) influx() {
	c := ld.c
	if c.Influx != nil {
		ic := c.Influx.WithDefaults()
		ic.TokenFile = ld.abs(ic.TokenFile)
		ic.TLS.CAFile = ld.abs(ic.TLS.CAFile)
		for _, p := range ic.Problems() {
			ld.ce.add("influx."+p.Key, "%s", p.Msg)
		}
		c.Influx = &ic
	}
}

// calibrations checks calibration_past_due and loads the calibrations folder.
func (ld *loader) calibrations() {
	c, ce := ld.c, ld.ce
	switch c.CalibrationPastDue {
	case "":
		c.CalibrationPastDue = PastDueWarn
	case PastDueWarn, PastDueRefuse:
	default:
		ce.add("calibration_past_due", "%q: want %s or %s", c.CalibrationPastDue, PastDueWarn, PastDueRefuse)
	}
	if c.Calibrations != "" {
		c.Calibrations = ld.abs(c.Calibrations)
		recs, err := calrec.LoadDir(c.Calibrations)
		if err != nil {
			ce.add("calibrations", "%v", err)
		}
		ld.l.Calibrations = recs
	}
}

// fixtures loads every fixture entry; a fixture name or a watched folder
// may appear once.
func (ld *loader) fixtures() {
	if len(ld.c.Fixtures) == 0 {
		ld.ce.add("fixtures", "required: at least one fixture with its fixture and specimen files")
	}
	names, watches := map[string]string{}, map[string]string{}
	for i, fe := range ld.c.Fixtures {
		if lf, ok := ld.fixture(fmt.Sprintf("fixtures.%d", i), fe, names, watches); ok {
			ld.l.Fixtures = append(ld.l.Fixtures, lf)
		}
	}
}

// fixture loads the fixture entry at p: its fixture and specimen files,
// the specimen's grade, the fixture's coil record, the geometry, the
// watched folder and the schedule. ok is false when the fixture or the
// specimen file could not be loaded (the entry is then left out).
func (ld *loader) fixture(p string, fe FixtureEntry, names, watches map[string]string) (lf LoadedFixture, ok bool) {
	ce, l := ld.ce, ld.l
	lf = LoadedFixture{Watch: ld.abs(fe.Watch), Poll: fe.Poll.D()}
	if lf.Poll == 0 {
		lf.Poll = DefaultPoll
	}
	if lf.Poll < 100*time.Millisecond {
		ce.add(p+".poll", "must be at least 100ms, got %s", lf.Poll)
	}
	fx, err := config.LoadFixture(ld.abs(fe.Fixture))
	if err != nil {
		ce.add(p+".fixture", "%v", err)
		return lf, false
	}
	sp, err := config.LoadSpecimen(ld.abs(fe.Specimen))
	if err != nil {
		ce.add(p+".specimen", "%v", err)
		return lf, false
	}
	l.Registry.checkGrade(ce, p+".specimen", sp)
	// A coil record must fit its fixture now, not at the first run.
	if _, _, err := calrec.Use(calrec.Select(l.Calibrations, fx.Name, nil), fx, time.Time{}); err != nil {
		ce.add("calibrations", "fixture %s: %v", fx.Name, err)
	}
	lf.Name, lf.Fixture, lf.Specimen = fx.Name, fx, sp
	if prev, dup := names[fx.Name]; dup {
		ce.add(p+".fixture", "fixture %q is already driven by %s", fx.Name, prev)
	}
	names[fx.Name] = p
	if g, err := recipe.GeometryOf(fx, sp); err == nil {
		lf.Geometry = g
	} else if fx.HFrom == "current" {
		ce.add(p+".specimen", "%v", err)
	}
	if lf.Watch != "" {
		ld.watch(p, lf.Watch, watches)
	}
	lf.Schedule = ld.schedule(p, fe.Schedule, fx, lf.Geometry)
	return lf, true
}

// watch checks the watched folder of the fixture entry at p: watched by no
// other entry, and a folder if it exists.
func (ld *loader) watch(p, dir string, watches map[string]string) {
	ce := ld.ce
	if prev, dup := watches[dir]; dup {
		ce.add(p+".watch", "folder %s is already watched by %s", dir, prev)
	}
	watches[dir] = p
	if st, err := os.Stat(dir); err == nil && !st.IsDir() {
		ce.add(p+".watch", "%s is not a folder", dir)
	} else if err != nil && !os.IsNotExist(err) {
		ce.add(p+".watch", "%v", err)
	}
}

// schedule parses the schedule of the fixture entry at p and checks each
// recipe against the fixture; the entries with a problem are left out.
func (ld *loader) schedule(p string, entries []ScheduleEntry, fx config.Fixture, g recipe.Geometry) []Scheduled {
	var out []Scheduled
	for j, se := range entries {
		sp := fmt.Sprintf("%s.schedule.%d", p, j)
		s, err := parseSchedule(se, ld.abs)
		if err != nil {
			ld.ce.add(sp+"."+err.key, "%s", err.msg)
			continue
		}
		if _, err := recipe.Expand(s.Recipe, fx, g); err != nil {
			ld.ce.add(sp+".recipe", "refused on fixture %q: %v", fx.Name, err)
			continue
		}
		out = append(out, s)
	}
	return out
}

// Token returns the bearer token for mutations, or "" when none is set.
func (l *Loaded) Token() string { return l.token }

// Users returns the named users of http.users_file (nil: none).
func (l *Loaded) Users() []api.Credential { return l.users }

// Fixture returns the loaded fixture named name.
func (l *Loaded) Fixture(name string) (LoadedFixture, bool) {
	for _, f := range l.Fixtures {
		if f.Name == name {
			return f, true
		}
	}
	return LoadedFixture{}, false
}

type cerr struct {
	doc *configs.Doc
	es  configs.Errors
	env map[string]string // setting → the HYSTD_* variable that overrode it
}

// add records a problem of the setting at path. A setting an environment
// variable overrode is blamed on the variable, not on the file's line.
func (c *cerr) add(path, format string, args ...any) {
	if name, ok := c.env[path]; ok {
		c.es = append(c.es, &configs.Error{File: "environment", Key: name,
			Problem: fmt.Sprintf("overrides %s of %s: ", path, c.doc.File) + fmt.Sprintf(format, args...)})
		return
	}
	c.es = append(c.es, c.doc.Errorf(path, format, args...))
}

// EnvName is the environment variable that overrides a setting:
// HYSTD_ + the key in upper case with dots as underscores.
func EnvName(key string) string {
	return "HYSTD_" + strings.ToUpper(strings.ReplaceAll(key, ".", "_"))
}

// otherEnv are HYSTD_* variables read elsewhere: the default token variable
// of the forwarder and the developers' test and build switches
// (DEVELOPERS.md).
var otherEnv = map[string]bool{influx.DefaultTokenEnv: true, "HYSTD_VM_DIR": true, "HYSTD_LONG_BENCH": true,
	"HYSTD_INFLUXD": true, "HYSTD_DEB": true, "HYSTD_VERSION": true, "HYSTD_TOOLS_DIR": true,
	"HYSTD_CHROMIUM": true, "HYSTD_SCREENSHOTS": true}

// UnknownEnv lists the HYSTD_* variables of environ (os.Environ's form) that
// no setting, token or tool reads: most likely misspelt overrides. Names
// given as a token_env of the config are not reported.
func UnknownEnv(environ []string, c Config) []string {
	known := map[string]bool{}
	for _, k := range envKeys {
		known[EnvName(k)] = true
	}
	if c.Influx != nil && c.Influx.TokenEnv != "" {
		known[c.Influx.TokenEnv] = true
	}
	var out []string
	for _, kv := range environ {
		name, _, _ := strings.Cut(kv, "=")
		if strings.HasPrefix(name, "HYSTD_") && !known[name] && !otherEnv[name] {
			out = append(out, name)
		}
	}
	sort.Strings(out)
	return out
}

// overrideFromEnv applies HYSTD_* variables through viper: one fresh
// instance per load, every key bound explicitly (viper ignores unbound keys).
func overrideFromEnv(c *Config, ce *cerr) {
	v := viper.New()
	v.SetEnvPrefix("HYSTD")
	v.SetEnvKeyReplacer(strings.NewReplacer(".", "_"))
	for _, k := range envKeys {
		if err := v.BindEnv(k); err != nil {
			ce.add(k, "environment override: %v", err)
		}
	}
	set := func(k string, dst *string) {
		if v.IsSet(k) {
			*dst = v.GetString(k)
			ce.env[k] = EnvName(k)
		}
	}
	set("http.addr", &c.HTTP.Addr)
	set("http.token_file", &c.HTTP.TokenFile)
	set("http.users_file", &c.HTTP.UsersFile)
	set("store.path", &c.Store.Path)
	set("log.level", &c.Log.Level)
	set("log.format", &c.Log.Format)
	set("spool_dir", &c.SpoolDir)
	if v.IsSet("influx.url") || v.IsSet("influx.bucket") {
		if c.Influx == nil {
			c.Influx = &influx.Config{}
		}
	}
	if c.Influx != nil {
		set("influx.url", &c.Influx.URL)
		set("influx.org", &c.Influx.Org)
		set("influx.bucket", &c.Influx.Bucket)
		set("influx.token_file", &c.Influx.TokenFile)
	}
}

type schedErr struct{ key, msg string }

var dayNames = map[string]time.Weekday{"sun": time.Sunday, "mon": time.Monday, "tue": time.Tuesday,
	"wed": time.Wednesday, "thu": time.Thursday, "fri": time.Friday, "sat": time.Saturday}

func parseSchedule(se ScheduleEntry, abs func(string) string) (Scheduled, *schedErr) {
	var s Scheduled
	hh, mm, ok := strings.Cut(se.At, ":")
	h, err1 := strconv.Atoi(hh)
	m, err2 := strconv.Atoi(mm)
	if !ok || err1 != nil || err2 != nil || h < 0 || h > 23 || m < 0 || m > 59 || len(mm) != 2 {
		return s, &schedErr{"at", fmt.Sprintf("want a local time HH:MM such as \"07:30\", got %q", se.At)}
	}
	s.Hour, s.Minute = h, m
	for _, d := range se.Days {
		wd, ok := dayNames[strings.ToLower(d)]
		if !ok {
			return s, &schedErr{"days", fmt.Sprintf("%q is not one of mon, tue, wed, thu, fri, sat, sun", d)}
		}
		if s.Days == nil {
			s.Days = map[time.Weekday]bool{}
		}
		s.Days[wd] = true
	}
	if se.Recipe == "" {
		return s, &schedErr{"recipe", "required: the recipe file to run"}
	}
	s.RecipeFile = abs(se.Recipe)
	r, err := recipe.Load(s.RecipeFile)
	if err != nil {
		return s, &schedErr{"recipe", err.Error()}
	}
	s.Recipe = r
	return s, nil
}

// Next returns the first time after now at which s is due, in now's location.
func (s Scheduled) Next(now time.Time) time.Time {
	y, mo, d := now.Date()
	for k := 0; k <= 8; k++ {
		t := time.Date(y, mo, d+k, s.Hour, s.Minute, 0, 0, now.Location())
		if t.After(now) && (s.Days == nil || s.Days[t.Weekday()]) {
			return t
		}
	}
	return time.Time{} // unreachable: some day of the next 8 matches
}
