package main

import (
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"hystd/calib/loopcsv"
)

func init() { register(newAnalyzeCmd) }

// newAnalyzeCmd builds `hystd analyze FILE.csv [--json]`: the figures of a
// loop given as CSV (columns H in A/m and B in T, optional t in s).
func newAnalyzeCmd() *cobra.Command {
	var asJSON bool
	var opt loopcsv.Options
	c := &cobra.Command{
		Use:   "analyze FILE.csv",
		Short: "Figures of a B–H loop given as CSV (columns H, B, optional t)",
		Long: "Reads a loop from CSV with a header naming the columns H (A/m) and B (T), optionally t (s),\n" +
			"and prints Hmax, Bmax, Br, HcB, HcJ, mu_a, loss per cycle and (BH)max. The loop is taken as\n" +
			"already corrected; at least one full cycle is needed.",
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			f, err := os.Open(args[0])
			if err != nil {
				return err
			}
			defer f.Close()
			d, err := loopcsv.Read(f, args[0], opt)
			if err != nil {
				return err
			}
			r, err := loopcsv.Analyze(d, args[0])
			if err != nil {
				return err
			}
			if asJSON {
				return r.WriteJSON(cmd.OutOrStdout())
			}
			if err := r.WriteTable(cmd.OutOrStdout()); err != nil {
				return fmt.Errorf("writing the table: %w", err)
			}
			return nil
		},
	}
	c.Flags().BoolVar(&asJSON, "json", false, "print one JSON object with SI keys")
	c.Flags().StringVar(&opt.HUnit, "h-unit", "A/m", "unit of the H column: A/m, kA/m, Oe, kOe")
	c.Flags().StringVar(&opt.BUnit, "b-unit", "T", "unit of the B column: T, mT, G, kG")
	_ = c.RegisterFlagCompletionFunc("h-unit", fixedValues("A/m", "kA/m", "Oe", "kOe"))
	_ = c.RegisterFlagCompletionFunc("b-unit", fixedValues("T", "mT", "G", "kG"))
	return c
}
