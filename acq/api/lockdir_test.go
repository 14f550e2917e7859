package api

import (
	"os"
	"testing"

	"hystd/drivers/link"
)

// TestMain gives this package's tests a lock directory of their own, so
// that fixture locks (every test fixture has the same name) never collide
// with another test binary or another hystd on the machine.
func TestMain(m *testing.M) {
	dir, err := os.MkdirTemp("", "hystd-locks-")
	if err != nil {
		panic(err)
	}
	os.Setenv(link.LockDirEnv, dir)
	code := m.Run()
	os.RemoveAll(dir)
	os.Exit(code)
}
