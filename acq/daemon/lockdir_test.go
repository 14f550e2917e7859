package daemon

import (
	"os"
	"testing"

	"hystd/acq/fixture/fixturetest"
)

// TestMain gives this package's tests a lock directory of their own.
func TestMain(m *testing.M) { os.Exit(fixturetest.RunWithLockDir(m)) }
