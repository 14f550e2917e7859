package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"hystd/acq/check"
)

func init() { register(newCheckCmd) }

func newCheckCmd() *cobra.Command {
	return &cobra.Command{
		Use:   "check FILE...",
		Short: "Validate config files (fixture, specimen, recipe, profile, bench, daemon)",
		Long: "check validates each file by its top-level kind and prints every problem as\n" +
			"FILE:LINE: key: problem, and every warning (allowed, but probably wrong: a strip\n" +
			"length in m that looks like one in mm) as FILE:LINE: key: warning: problem.\n" +
			"It exits non-zero when any file has a problem; warnings alone exit 0.",
		Args: cobra.MinimumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			bad := 0
			for _, f := range args {
				warns, err := check.Report(f)
				if err != nil {
					fmt.Fprintln(cmd.ErrOrStderr(), err)
					bad++
					continue
				}
				for _, w := range warns {
					fmt.Fprintln(cmd.OutOrStdout(), w)
				}
				if n := len(warns); n > 0 {
					fmt.Fprintf(cmd.OutOrStdout(), "%s: ok, %d warning(s)\n", f, n)
					continue
				}
				fmt.Fprintf(cmd.OutOrStdout(), "%s: ok\n", f)
			}
			if bad > 0 {
				return &exitError{code: 1, err: fmt.Errorf("%d of %d files have problems", bad, len(args))}
			}
			return nil
		},
	}
}
