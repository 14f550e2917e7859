package api

import (
	"errors"
	"log/slog"

	"hystd/acq/live"
	"hystd/acq/outbox"
	"hystd/acq/record"

	"github.com/prometheus/client_golang/prometheus"
)

// DefaultAddr is where the API listens unless configured: loopback only,
// the daemon's default http.addr.
const DefaultAddr = "127.0.0.1:8740"

// Errors of a Runner's Submit and Abort (and of mounting), as the daemon
// returns them; the API maps each to its HTTP status.
var (
	ErrUnknownFixture = errors.New("unknown fixture")
	ErrNotActive      = errors.New("run is not queued or running")
	ErrStopping       = errors.New("daemon is stopping")
	ErrQueueFull      = errors.New("queue full")
	// ErrFixtureNeeded: Submit was given no fixture name and the daemon
	// drives more than one (or none), so it cannot choose.
	ErrFixtureNeeded = errors.New("no fixture named")
	// ErrUnknownSpecimen: a specimen reference is neither a registered id nor a file.
	ErrUnknownSpecimen = errors.New("unknown specimen")
	// ErrNotWaiting: no run waits for a specimen to be mounted.
	ErrNotWaiting = errors.New("not waiting for a specimen to be mounted")
)

// FixtureStatus is one fixture's state for /healthz.
type FixtureStatus struct {
	Name      string `json:"name"`
	ActiveRun string `json:"active_run,omitempty"`
	Queued    int    `json:"queued"`
	Watch     string `json:"watch,omitempty"`
}

// MountWait is a run waiting for its specimen to be mounted.
type MountWait struct {
	RunID    string `json:"run_id"`
	Fixture  string `json:"fixture"`
	Specimen string `json:"specimen"` // to be mounted
	Mounted  string `json:"mounted"`  // on the fixture now, as far as the daemon knows
}

// DaemonParts are what the daemon gives ForDaemon to build the HTTP API over.
type DaemonParts struct {
	Reader  record.Reader
	Runner  Runner
	Live    *live.Hub
	Token   string              // bearer token for mutations (user SharedTokenUser, role admin)
	Users   func() []Credential // the named users in force (http.users_file), asked on every request; nil: none
	Metrics prometheus.Gatherer // the daemon's metrics, for the API's /metrics
	Outbox  outbox.Store        // quarantined loops, for the API's /api/v1/outbox
	Version string
	Log     *slog.Logger
}
