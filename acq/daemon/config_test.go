package daemon

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"hystd/acq/api"
	"hystd/acq/check"
	"hystd/acq/config/configtest"
	"hystd/acq/engine/enginetest"
	"hystd/acq/influx"
)

func TestSampleConfig(t *testing.T) {
	l, err := Load("../../configs/daemon.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if l.Config.HTTP.Addr != "127.0.0.1:8740" || len(l.Fixtures) != 1 || l.Fixtures[0].Name != "aldermoor-ring-2" {
		t.Errorf("loaded %+v", l.Config)
	}
	if got := l.Fixtures[0].Schedule; len(got) != 1 || got[0].Hour != 7 || got[0].Minute != 30 || got[0].Recipe.Name != "ring-reference-morning" {
		t.Errorf("schedule %+v", got)
	}
	if l.Config.SpoolDir != "/var/lib/hystd/spool" {
		t.Errorf("spool dir %q", l.Config.SpoolDir)
	}
}

// writeConfig writes a daemon config beside copies of the sample fixture and
// specimen and returns its path.
func writeConfig(t *testing.T, body string) string {
	t.Helper()
	dir := t.TempDir()
	configtest.WriteRing(t, dir)
	p := filepath.Join(dir, "d.yaml")
	if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

const fixtures = "fixtures:\n  - {fixture: fixture-ring-bench.yaml, specimen: specimen-ring-r17.yaml}\n"

func TestConfigErrors(t *testing.T) {
	tests := []struct{ name, body, want string }{
		{"unknown key", "kind: daemon\nstore: {path: x.db}\nhttp: {adress: 1}\n" + fixtures, "d.yaml:3: http.adress: unknown key (known keys: addr, hosts, open_without_token, token_file, users_file)"},
		{"bad addr", "kind: daemon\nstore: {path: x.db}\nhttp: {addr: localhost}\n" + fixtures, "d.yaml:3: http.addr: \"localhost\" is not host:port"},
		{"no store", "kind: daemon\n" + fixtures, "store.path: required"},
		{"bad level", "kind: daemon\nstore: {path: x.db}\nlog: {level: loud}\n" + fixtures, "d.yaml:3: log.level: must be debug, info, warn or error"},
		{"missing fixture file", "kind: daemon\nstore: {path: x.db}\nfixtures:\n  - {fixture: nope.yaml, specimen: specimen-ring-r17.yaml}\n", "d.yaml:4: fixtures.0.fixture: open"},
		{"same fixture twice", "kind: daemon\nstore: {path: x.db}\n" + fixtures + "  - {fixture: fixture-ring-bench.yaml, specimen: specimen-ring-r17.yaml}\n",
			"fixtures.1.fixture: fixture \"aldermoor-ring-2\" is already driven by fixtures.0"},
		{"bad time", "kind: daemon\nstore: {path: x.db}\nfixtures:\n  - fixture: fixture-ring-bench.yaml\n    specimen: specimen-ring-r17.yaml\n    schedule:\n      - {at: \"7h30\", recipe: r.yaml}\n",
			"d.yaml:7: fixtures.0.schedule.0.at: want a local time HH:MM"},
		{"poll without unit", "kind: daemon\nstore: {path: x.db}\nfixtures:\n  - fixture: fixture-ring-bench.yaml\n    specimen: specimen-ring-r17.yaml\n    poll: 2\n",
			"d.yaml:6: fixtures.0.poll: duration \"2\" has no unit"},
		{"short token", "kind: daemon\nstore: {path: x.db}\nhttp: {token_file: tok}\n" + fixtures, "http.token_file:"},
		{"all addresses without token", "kind: daemon\nstore: {path: x.db}\nhttp: {addr: \"0.0.0.0:8740\"}\n" + fixtures,
			"d.yaml:3: http.addr: 0.0.0.0:8740 is reachable from other machines and no http.token_file is set"},
		{"lab address without token", "kind: daemon\nstore: {path: x.db}\nhttp: {addr: \"192.0.2.10:8740\"}\n" + fixtures,
			"http.open_without_token: true to accept that"},
		{"past-due policy", "kind: daemon\nstore: {path: x.db}\ncalibration_past_due: ignore\n" + fixtures,
			"d.yaml:3: calibration_past_due: \"ignore\": want warn or refuse"},
		{"bad calibration record", "kind: daemon\nstore: {path: x.db}\ncalibrations: cal\n" + fixtures,
			"cal/int.yaml:8: integrator.gain.value: must be > 0, got -1"},
		{"coil record for a fixture without coil area", "kind: daemon\nstore: {path: x.db}\ncalibrations: coil\n" + fixtures,
			"calibrations: fixture aldermoor-ring-2: "},
		{"bad users file", "kind: daemon\nstore: {path: x.db}\nhttp: {users_file: users.yaml}\n" + fixtures,
			"/users.yaml:3: users.0.role: \"boss\": want review, operate or admin"},
		{"host with port", "kind: daemon\nstore: {path: x.db}\nhttp: {hosts: [\"hystd.lab.example:8740\"]}\n" + fixtures,
			"d.yaml:3: http.hosts.0: \"hystd.lab.example:8740\": want a host name without port or scheme"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			p := writeConfig(t, tc.body)
			dir := filepath.Dir(p)
			_ = os.WriteFile(filepath.Join(dir, "tok"), []byte("short"), 0o600)
			_ = os.Mkdir(filepath.Join(dir, "cal"), 0o755)
			_ = os.WriteFile(filepath.Join(dir, "cal", "int.yaml"), []byte("kind: calibration\nid: C1\napplies_to: {role: integrator, identity: \"X,Y,1\"}\n"+
				"certificate: Z\ndate: 2026-01-01\ndue: 2027-01-01\nintegrator:\n  gain: {value: -1, u: 0}\n"), 0o644)
			_ = os.WriteFile(filepath.Join(dir, "users.yaml"), []byte("kind: users\nusers:\n  - {name: ana, role: boss, token_sha256: "+api.TokenHash("t")+"}\n"), 0o600)
			_ = os.Mkdir(filepath.Join(dir, "coil"), 0o755)
			_ = os.WriteFile(filepath.Join(dir, "coil", "coil.yaml"), []byte("kind: calibration\nid: C2\napplies_to: {fixture: aldermoor-ring-2}\n"+
				"certificate: Z\ndate: 2026-01-01\ndue: 2027-01-01\ncoil:\n  area_turns_m2: {value: 0.01, u: 0}\n"), 0o644)
			_, err := Load(p)
			if err == nil {
				t.Fatal("accepted")
			}
			if !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error:\n%v\nwant it to contain:\n%s", err, tc.want)
			}
		})
	}
}

// TestScheduledRecipeRefused: a scheduled recipe beyond a fixture limit is
// refused when the config is loaded, naming the step and the limit.
func TestScheduledRecipeRefused(t *testing.T) {
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\nfixtures:\n  - fixture: fixture-ring-bench.yaml\n    specimen: specimen-ring-r17.yaml\n    schedule:\n      - {at: \"07:30\", recipe: big.yaml}\n")
	big := "kind: recipe\nname: big\nsteps:\n  - record_loop: {amplitude: 20 kA/m, rate: 1 kA/m/s, points: 100}\n"
	if err := os.WriteFile(filepath.Join(filepath.Dir(p), "big.yaml"), []byte(big), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err := Load(p)
	if err == nil || !strings.Contains(err.Error(), "fixtures.0.schedule.0.recipe: refused on fixture \"aldermoor-ring-2\"") ||
		!strings.Contains(err.Error(), "big.yaml:4: steps.0.record_loop.amplitude") || !strings.Contains(err.Error(), "limits.max_current_a = 10 A") {
		t.Errorf("error: %v", err)
	}
}

// TestEnvOverride: HYSTD_* variables override the file, through viper.
func TestEnvOverride(t *testing.T) {
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	t.Setenv("HYSTD_HTTP_ADDR", "127.0.0.1:9999")
	t.Setenv("HYSTD_STORE_PATH", "/srv/loops.db")
	t.Setenv("HYSTD_LOG_FORMAT", "json")
	l, err := Load(p)
	if err != nil {
		t.Fatal(err)
	}
	if l.Config.HTTP.Addr != "127.0.0.1:9999" || l.Config.Store.Path != "/srv/loops.db" || l.Config.Log.Format != "json" {
		t.Errorf("overrides not applied: %+v", l.Config)
	}
	t.Setenv("HYSTD_LOG_LEVEL", "loud")
	_, err = Load(p)
	if err == nil || !strings.Contains(err.Error(), "log.level of "+p+": must be") {
		t.Errorf("bad override accepted: %v", err)
	}
	// The variable is named, not a line of the file (which has no log.level).
	if err == nil || !strings.HasPrefix(err.Error(), "environment: HYSTD_LOG_LEVEL: ") {
		t.Errorf("error does not name the variable: %v", err)
	}
}

func TestUnknownEnv(t *testing.T) {
	env := []string{"HYSTD_HTTP_ADRR=0.0.0.0:1", "HYSTD_HTTP_ADDR=127.0.0.1:1", "HOME=/root", "HYSTD_INFLUX_TOKEN=x",
		"HYSTD_SITE_TOKEN=y", "HYSTD_VM_DIR=/tmp", "HYSTD_LOG_LEVL=debug"}
	tests := []struct {
		name string
		cfg  Config
		want string
	}{
		{"no influx", Config{}, "HYSTD_HTTP_ADRR HYSTD_LOG_LEVL HYSTD_SITE_TOKEN"},
		{"token_env names one", Config{Influx: &influx.Config{TokenEnv: "HYSTD_SITE_TOKEN"}}, "HYSTD_HTTP_ADRR HYSTD_LOG_LEVL"},
	}
	for _, tc := range tests {
		if got := strings.Join(UnknownEnv(env, tc.cfg), " "); got != tc.want {
			t.Errorf("%s: %q, want %q", tc.name, got, tc.want)
		}
	}
}

func TestScheduleNext(t *testing.T) {
	loc := time.UTC
	weekdays := map[time.Weekday]bool{time.Monday: true, time.Tuesday: true, time.Wednesday: true, time.Thursday: true, time.Friday: true}
	tests := []struct {
		name string
		s    Scheduled
		now  time.Time
		want time.Time
	}{
		// 2026-03-06 is a Friday (calendar).
		{"later today", Scheduled{Hour: 7, Minute: 30}, time.Date(2026, 3, 6, 6, 0, 0, 0, loc), time.Date(2026, 3, 6, 7, 30, 0, 0, loc)},
		{"exactly now is next day", Scheduled{Hour: 7, Minute: 30}, time.Date(2026, 3, 6, 7, 30, 0, 0, loc), time.Date(2026, 3, 7, 7, 30, 0, 0, loc)},
		{"weekdays skip the weekend", Scheduled{Hour: 7, Minute: 30, Days: weekdays}, time.Date(2026, 3, 6, 8, 0, 0, 0, loc), time.Date(2026, 3, 9, 7, 30, 0, 0, loc)},
		{"month end", Scheduled{Hour: 0, Minute: 5}, time.Date(2026, 3, 31, 23, 0, 0, 0, loc), time.Date(2026, 4, 1, 0, 5, 0, 0, loc)},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := tc.s.Next(tc.now); !got.Equal(tc.want) {
				t.Errorf("Next(%s) = %s, want %s", tc.now, got, tc.want)
			}
		})
	}
}

// TestOpenWithoutToken: a non-loopback address without a token is accepted
// only with http.open_without_token, and the daemon then logs a warning.
func TestOpenWithoutToken(t *testing.T) {
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\nhttp: {addr: \"0.0.0.0:0\", open_without_token: true}\n"+fixtures)
	if _, err := Load(p); err != nil {
		t.Fatal(err)
	}
	clk := &schedClock{enginetest.NewClock()}
	fb := &fakeBench{clk: clk, sup: enginetest.NewSupply(clk.Clock)}
	sigs := make(chan os.Signal, 1)
	log := &syncWriter{w: &bytes.Buffer{}}
	listening := make(chan string, 1)
	served := make(chan error, 1)
	go func() {
		served <- Serve(t.Context(), p, Wiring{Open: fb.open, Signals: sigs, Stderr: log,
			Listening: func(a string) { listening <- a }})
	}()
	select {
	case <-listening:
	case err := <-served:
		t.Fatalf("Serve: %v", err)
	}
	sigs <- syscall.SIGTERM
	if err := <-served; err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(log.String(), "without a token (http.open_without_token): every stored run") {
		t.Errorf("no warning in the log:\n%s", log.String())
	}
}

// TestCheckWarnsSpecimen: `hystd check` on a daemon config warns about the
// geometry of a fixture's specimen (an Epstein strip length of 305 m, see
// acq/check's TestWarnings), at the key naming the specimen file.
func TestCheckWarnsSpecimen(t *testing.T) {
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\nfixtures:\n  - {fixture: fixture-ring-bench.yaml, specimen: e305.yaml}\n")
	b, err := os.ReadFile("../check/testdata/specimen-epstein-305m.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(filepath.Dir(p), "e305.yaml"), b, 0o644); err != nil {
		t.Fatal(err)
	}
	ws, err := check.Report(p)
	if err != nil {
		t.Fatal(err)
	}
	if len(ws) != 1 || !strings.Contains(ws[0].Error(), "d.yaml:4: fixtures.0.specimen: warning: specimen E-305: epstein: strip length 305.000 m") {
		t.Errorf("warnings %v", ws)
	}
}
