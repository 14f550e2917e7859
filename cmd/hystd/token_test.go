package main

import (
	"encoding/base64"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"hystd/acq/api"
)

// TestTokenCommand: the token printed is 32 random bytes (256 bits), and
// the users-file entry printed beside it loads and names its SHA-256.
func TestTokenCommand(t *testing.T) {
	out, _, code := runCmd(t, "token", "--name", "mira", "--role", "operate")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, out)
	}
	lines := strings.Split(out, "\n")
	if len(lines) < 5 {
		t.Fatalf("output:\n%s", out)
	}
	tok := lines[1]
	if b, err := base64.RawURLEncoding.DecodeString(tok); err != nil || len(b) != 32 {
		t.Fatalf("token %q: %d bytes, %v", tok, len(b), err)
	}
	entry := lines[4]
	if want := "  - {name: mira, role: operate, token_sha256: " + api.TokenHash(tok) + "}"; entry != want {
		t.Fatalf("entry %q, want %q", entry, want)
	}
	p := filepath.Join(t.TempDir(), "users.yaml")
	if err := os.WriteFile(p, []byte("kind: users\nusers:\n"+entry+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	creds, err := api.LoadUsers(p)
	if err != nil || len(creds) != 1 || creds[0].Name != "mira" || creds[0].Role != api.RoleOperate {
		t.Fatalf("loaded %+v, %v", creds, err)
	}
	if _, stderr, code := runCmd(t, "token", "--name", "x", "--role", "boss"); code != exitUsage || !strings.Contains(stderr, `--role "boss"`) {
		t.Errorf("bad role: exit %d, %s", code, stderr)
	}
}
