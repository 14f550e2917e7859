package main

import (
	"bytes"
	"errors"
	"fmt"
	"time"

	"github.com/spf13/cobra"

	"hystd/acq/record"
	"hystd/acq/report"
	"hystd/acq/store"
)

func init() { register(newReportCmd) }

func newReportCmd() *cobra.Command {
	var dataDir, cfgPath, out string
	cmd := &cobra.Command{
		Use:   "report RUN [-o FILE.pdf]",
		Short: "Write a stored run's test report as PDF",
		Long: "report reads run RUN from DIR/hystd.db (or the store of a daemon config, --config FILE) and\n" +
			"writes its test report as PDF to FILE (default RUN.pdf): specimen, grade and geometry, fixture\n" +
			"and instrument identities, test conditions, each loop's plot, figures with U, corrections,\n" +
			"verdicts with their decision rule, cautions, software version and config hash, and room to sign.",
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			ctx := cmd.Context()
			db, err := storePath(dataDir, cfgPath)
			if err != nil {
				return err
			}
			st, err := store.Open(ctx, db)
			if err != nil {
				return err
			}
			defer st.Close()
			in, err := report.FromStore(ctx, st, args[0])
			if err != nil {
				if errors.Is(err, record.ErrNotFound) {
					return &exitError{code: 3, err: err}
				}
				return err
			}
			in.Software, in.Generated = version, time.Now()
			var buf bytes.Buffer
			if err := report.Write(&buf, in); err != nil {
				return err
			}
			if out == "" {
				out = args[0] + ".pdf"
			}
			if err := writeAtomic(out, buf.Bytes()); err != nil {
				return err
			}
			fmt.Fprintf(cmd.OutOrStdout(), "report of run %s: %s (%d loops)\n", args[0], out, len(in.Loops))
			return nil
		},
	}
	cmd.Flags().StringVar(&dataDir, "data", "hystd-data", "folder holding hystd.db")
	cmd.Flags().StringVar(&cfgPath, "config", "", "daemon config (kind: daemon) whose store.path to read, instead of --data")
	cmd.Flags().StringVarP(&out, "output", "o", "", "PDF file to write (default RUN.pdf)")
	return cmd
}
