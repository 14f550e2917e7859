package api

import (
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"hystd/acq/record"
)

// Tokens of the users file below; the file holds only their SHA-256.
const (
	reviewToken  = "review-token-4f1c9a0d2b7e"
	operateToken = "operate-token-8a3e51c7d9f2"
)

func writeUsers(t *testing.T, body string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), "users.yaml")
	if err := os.WriteFile(p, []byte(body), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestTokenHash: the hash is plain SHA-256, checked against the "abc"
// example of FIPS 180-2 (appendix B.1).
func TestTokenHash(t *testing.T) {
	if got := TokenHash("abc"); got != "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad" {
		t.Errorf("SHA-256(abc) = %s", got)
	}
}

// TestUsersRoles: a review token reads but cannot start a run (403 naming
// user, role and the role needed); an operate token starts and aborts, and
// the runner sees who (UserFrom); requeuing the outbox needs admin; the
// single token keeps working as before, as the shared-token admin.
func TestUsersRoles(t *testing.T) {
	p := writeUsers(t, "kind: users\nusers:\n"+
		"  - {name: ana, role: review, token_sha256: "+TokenHash(reviewToken)+"}\n"+
		"  - {name: ben, role: operate, token_sha256: \"sha256:"+TokenHash(operateToken)+"\"}\n")
	creds, err := LoadUsers(p)
	if err != nil {
		t.Fatal(err)
	}
	e := newEnv(t, Options{Token: testToken, Users: creds, ProtectReads: true})
	code, m, _ := e.do(t, "POST", "/api/v1/runs", reviewToken, "application/yaml", strings.NewReader(goodRecipe))
	if code != 403 || m["error"] != "user ana has role review: starting a run needs role operate or above" {
		t.Errorf("review token on start: %d %v", code, m)
	}
	if n := e.runner.callCount(); n != 0 {
		t.Errorf("runner called %d times by a refused request", n)
	}
	if code, _, _ := e.do(t, "GET", "/api/v1/runs", reviewToken, "", nil); code != 200 {
		t.Errorf("review token on a protected read: %d", code)
	}
	code, m, _ = e.do(t, "POST", "/api/v1/runs", operateToken, "application/yaml", strings.NewReader(goodRecipe))
	if code != 202 {
		t.Fatalf("operate token on start: %d %v", code, m)
	}
	if code, m, _ := e.do(t, "POST", "/api/v1/runs/RUN-001/abort", operateToken, "", nil); code != 202 {
		t.Errorf("operate token on abort: %d %v", code, m)
	}
	code, m, _ = e.do(t, "POST", "/api/v1/outbox/requeue?all=true", operateToken, "", nil)
	if code != 403 || !strings.Contains(m["error"].(string), "requeuing the outbox needs role admin") {
		t.Errorf("operate token on requeue: %d %v", code, m)
	}
	if code, m, _ := e.do(t, "POST", "/api/v1/runs", testToken, "application/yaml", strings.NewReader(goodRecipe)); code != 202 {
		t.Errorf("single token on start: %d %v", code, m)
	}
	e.runner.mu.Lock()
	got := e.runner.users
	e.runner.mu.Unlock()
	if want := []string{"submit ben", "abort ben", "submit " + SharedTokenUser}; !reflect.DeepEqual(got, want) {
		t.Errorf("runner saw users %v, want %v", got, want)
	}
	if code, _, _ := e.do(t, "POST", "/api/v1/runs", "not-a-token-of-anyone", "application/yaml", strings.NewReader(goodRecipe)); code != 401 {
		t.Errorf("unknown token: %d, want 401", code)
	}
}

// TestLoadUsersErrors: every problem of a users file names file, line, key.
func TestLoadUsersErrors(t *testing.T) {
	h := TokenHash(operateToken)
	tests := []struct{ name, body, want string }{
		{"bad role", "kind: users\nusers:\n  - name: ana\n    role: boss\n    token_sha256: " + h + "\n",
			"users.yaml:4: users.0.role: \"boss\": want review, operate or admin"},
		{"short hash", "kind: users\nusers:\n  - {name: ana, role: review, token_sha256: abc123}\n",
			"users.yaml:3: users.0.token_sha256: want the token's SHA-256 as 64 hex digits"},
		{"plain token instead of hash", "kind: users\nusers:\n  - {name: ana, role: review, token_sha256: " + operateToken + "}\n",
			"users.yaml:3: users.0.token_sha256:"},
		{"same token twice", "kind: users\nusers:\n  - {name: ana, role: review, token_sha256: " + h + "}\n  - {name: ben, role: admin, token_sha256: " + h + "}\n",
			"users.yaml:4: users.1.token_sha256: the same token as users.0"},
		{"same name twice", "kind: users\nusers:\n  - {name: ana, role: review, token_sha256: " + h + "}\n  - {name: ana, role: admin, token_sha256: " + TokenHash("x") + "}\n",
			"users.yaml:4: users.1.name: ana is also users.0"},
		{"bad name", "kind: users\nusers:\n  - {name: \"a b\", role: review, token_sha256: " + h + "}\n",
			"users.yaml:3: users.0.name: \"a b\": want 1–64 letters"},
		{"unknown key", "kind: users\nusers:\n  - {name: ana, role: review, token: " + h + "}\n",
			"users.yaml:3: users.0.token: unknown key"},
		{"wrong kind", "kind: daemon\nusers:\n  - {name: ana, role: review, token_sha256: " + h + "}\n",
			"users.yaml:1: kind: want \"users\", got \"daemon\""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := LoadUsers(writeUsers(t, tc.body))
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v\nwant it to contain %s", err, tc.want)
			}
		})
	}
}

// TestRunShowsWhoAndCalibrations: a run's answer names who aborted it
// (from the event ActionText wrote) and the calibrations it used, with a
// past-due one among the flags.
func TestRunShowsWhoAndCalibrations(t *testing.T) {
	e := newEnv(t, Options{Token: testToken})
	addEvents(t, e.store,
		record.Event{RunID: "RUN-B", At: t0, Level: "info", Text: "used calibration CAL-9 (integrator X,Y,1; certificate C-9, 2025-01-01, due 2026-01-01)"},
		record.Event{RunID: "RUN-B", At: t0, Level: "warn", Text: "calibration CAL-9 is past due (due 2026-01-01): figures rest on an expired calibration"},
		record.Event{RunID: "RUN-B", At: t0, Level: "info", Text: ActionText(User{Name: "tomas", Role: RoleAdmin}, ActionAbort)},
	)
	code, m, _ := e.do(t, "GET", "/api/v1/runs/RUN-B", "", "", nil)
	if code != 200 {
		t.Fatalf("%d %v", code, m)
	}
	if m["aborted_by"] != "tomas" {
		t.Errorf("aborted_by %v", m["aborted_by"])
	}
	cals, _ := m["calibrations"].([]any)
	if len(cals) != 1 || cals[0] != "CAL-9 (integrator X,Y,1; certificate C-9, 2025-01-01, due 2026-01-01) — PAST DUE at the run" {
		t.Errorf("calibrations %v", m["calibrations"])
	}
	flags, _ := m["flags"].([]any)
	if len(flags) == 0 || !strings.Contains(flags[0].(string), "calibration CAL-9 is past due") {
		t.Errorf("flags %v", flags)
	}
}
