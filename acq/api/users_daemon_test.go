package api_test

import (
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"hystd/acq/api"
)

// TestUsersFileInDaemon: `hystd serve` with http.users_file beside the
// token file, through the daemon's own wiring (ForDaemon): each user acts
// with their own role, and after the users file is changed and the daemon
// gets SIGHUP, a removed user's token is refused at once while the others
// and the single token keep working.
func TestUsersFileInDaemon(t *testing.T) {
	const (
		reviewToken  = "review-token-4f1c9a0d2b7e"
		operateToken = "operate-token-8a3e51c7d9f2"
		adminToken   = "admin-token-c07e4b19d6a8"
	)
	users := func(withAdmin bool) string {
		s := "kind: users\nusers:\n" +
			"  - {name: ana, role: review, token_sha256: " + api.TokenHash(reviewToken) + "}\n" +
			"  - {name: ben, role: operate, token_sha256: " + api.TokenHash(operateToken) + "}\n"
		if withAdmin {
			s += "  - {name: cy, role: admin, token_sha256: " + api.TokenHash(adminToken) + "}\n"
		}
		return s
	}
	bs := startServer(t, serverSetup{simClock: true, users: users(true)})
	requeue := func(token string) (int, map[string]any) {
		var m map[string]any
		return bs.call(t, "POST", "/api/v1/outbox/requeue?all=true", token, "", &m), m
	}
	if code, m := requeue(operateToken); code != 403 || !strings.Contains(m["error"].(string), "user ben has role operate") {
		t.Errorf("operate token on requeue: %d %v, want 403 naming ben", code, m)
	}
	// Let through: the outbox is empty, so the requeue answers 404.
	if code, m := requeue(adminToken); code != 404 {
		t.Errorf("admin token on requeue: %d %v, want 404 (authorized, nothing quarantined)", code, m)
	}
	var m map[string]any
	if code := bs.call(t, "POST", "/api/v1/runs?fixture="+bs.fixture, reviewToken, "kind: recipe\n", &m); code != 403 || !strings.Contains(m["error"].(string), "user ana has role review") {
		t.Errorf("review token on start: %d %v, want 403 naming ana", code, m)
	}

	if err := os.WriteFile(filepath.Join(bs.dir, "users.yaml"), []byte(users(false)), 0o600); err != nil {
		t.Fatal(err)
	}
	bs.sigs <- syscall.SIGHUP
	for deadline := time.Now().Add(20 * time.Second); !strings.Contains(bs.logs.String(), `msg="config reloaded"`); time.Sleep(20 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatalf("no reload in the log:\n%s", bs.logs)
		}
	}
	if code, m := requeue(adminToken); code != 401 {
		t.Errorf("removed user's token after the reload: %d %v, want 401", code, m)
	}
	if code, m := requeue(operateToken); code != 403 {
		t.Errorf("operate token after the reload: %d %v, want 403", code, m)
	}
	if code, m := requeue(browserToken); code != 404 {
		t.Errorf("the single token after the reload: %d %v, want 404 (authorized)", code, m)
	}
	if strings.Contains(bs.logs.String(), "http.users_file") {
		t.Errorf("the log still says the users file needs a restart:\n%s", bs.logs)
	}
}
