package main

import (
	"context"
	"fmt"

	"github.com/spf13/cobra"

	"hystd/acq/api"
	"hystd/acq/daemon"
	"hystd/drivers/clock"
)

func init() { register(newServeCmd) }

func newServeCmd() *cobra.Command {
	var cfgPath, simClock string
	cmd := &cobra.Command{
		Use:   "serve --config FILE",
		Short: "Run the daemon: fixtures, watched recipe folders, schedules, HTTP API, forwarder",
		Long: "serve drives the fixtures of a daemon config (kind: daemon): recipes submitted over\n" +
			"POST /api/v1/runs, dropped into a fixture's watched folder, or due on its schedule, one run\n" +
			"at a time per fixture. SIGHUP reloads the config (a bad file keeps the old one); SIGTERM\n" +
			"ramps every winding to zero and records the runs as aborted before exiting.\n" +
			"Settings can be overridden as HYSTD_<KEY>, e.g. HYSTD_HTTP_ADDR.",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			w := daemon.Wiring{
				Software: version,
				Stderr:   cmd.ErrOrStderr(),
				API:      api.ForDaemon,
			}
			if simClock != "" {
				c, err := clock.Dial(cmd.Context(), simClock)
				if err != nil {
					return &exitError{code: 2, err: fmt.Errorf("--sim-clock: %w", err)}
				}
				w.Clock = c
			}
			// Serve takes SIGTERM and SIGINT itself (a second one while it
			// stops abandons the halts): main's context, which a signal
			// also ends, must not hand it the same signal twice.
			return daemon.Serve(context.WithoutCancel(cmd.Context()), cfgPath, w)
		},
	}
	cmd.Flags().StringVar(&cfgPath, "config", "", "daemon config file (kind: daemon)")
	_ = cmd.MarkFlagRequired("config")
	// For tests that run the daemon as a child against a simulated bench in
	// their own process (DEVELOPERS.md, "Time"): instruments must be on ptys.
	cmd.Flags().StringVar(&simClock, "sim-clock", "", "run on the simulated time served at this URL by the process running the simulated bench (tests only)")
	_ = cmd.Flags().MarkHidden("sim-clock")
	return cmd
}
