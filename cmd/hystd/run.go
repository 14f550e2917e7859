package main

import (
	"errors"
	"fmt"
	"os/user"

	"github.com/spf13/cobra"

	"hystd/acq/daemon"
	"hystd/acq/engine"
)

func init() { register(newRunCmd) }

func newRunCmd() *cobra.Command {
	var cfgPath, fixture, specimen, operator string
	cmd := &cobra.Command{
		Use:   "run --config FILE RECIPE",
		Short: "Run one recipe in the foreground on a fixture of a daemon config",
		Long: "run validates RECIPE against the fixture's limits, runs it with the daemon's engine and\n" +
			"store, and prints progress. Ctrl-C or SIGTERM aborts with a safe ramp-down to zero.\n" +
			"At the end it prints the figures and, when the specimen names a grade, the verdicts.\n" +
			"Exit status: 0 finished, 1 refused or bad input, 2 usage, 3 failed, 4 aborted.",
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if operator == "" {
				operator = osUser()
			}
			_, err := daemon.RunOnce(cmd.Context(), daemon.RunOptions{
				ConfigPath: cfgPath, Fixture: fixture, RecipePath: args[0], Out: cmd.OutOrStdout(),
				Specimen: specimen, Operator: operator,
				Wiring: daemon.Wiring{Software: version, Stderr: cmd.ErrOrStderr()},
			})
			var stop *engine.Stop
			if errors.As(err, &stop) {
				code := exitRunFailed
				if stop.State == "aborted" {
					code = exitAborted
				}
				return &exitError{code: code, err: fmt.Errorf("%s", stop.Error())}
			}
			return err
		},
	}
	cmd.Flags().StringVar(&cfgPath, "config", "", "daemon config file (kind: daemon)")
	cmd.Flags().StringVar(&fixture, "fixture", "", "fixture name, when the config drives several")
	cmd.Flags().StringVar(&specimen, "specimen", "", "specimen to run on instead of the mounted one: an id of the config's specimens folder, or a specimen file")
	cmd.Flags().StringVar(&operator, "operator", "", "who runs it, recorded with the run and on its report (default: the OS user's login name)")
	_ = cmd.MarkFlagRequired("config")
	return cmd
}

// osUser is the login name of the user running hystd, recorded as the
// operator of a run started from the command line without --operator; ""
// when the system cannot tell.
func osUser() string {
	if u, err := user.Current(); err == nil {
		return u.Username
	}
	return ""
}
