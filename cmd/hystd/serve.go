package main

import (
	"github.com/spf13/cobra"

	"hystd/acq/api"
	"hystd/acq/daemon"
)

func init() { register(newServeCmd) }

func newServeCmd() *cobra.Command {
	var cfgPath string
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
			return daemon.Serve(cmd.Context(), cfgPath, daemon.Wiring{
				Software: version,
				Stderr:   cmd.ErrOrStderr(),
				API:      api.ForDaemon,
			})
		},
	}
	cmd.Flags().StringVar(&cfgPath, "config", "", "daemon config file (kind: daemon)")
	_ = cmd.MarkFlagRequired("config")
	return cmd
}
