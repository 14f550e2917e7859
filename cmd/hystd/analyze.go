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
	var asJSON, noCentre bool
	var opt loopcsv.Options
	c := &cobra.Command{
		Use:   "analyze FILE.csv",
		Short: "Figures of a B–H loop given as CSV (columns H, B, optional t)",
		Long: "Reads a loop from CSV with a header naming the columns H (A/m) and B (T), optionally t (s);\n" +
			"a name may carry its unit (\"H (Oe)\", \"B [kG]\"), fields may be separated by ',' or ';'.\n" +
			"Prints Hmax, Bmax, Br, HcB, HcJ, mu_a, loss per cycle and (BH)max with their expanded\n" +
			"uncertainty (k = 2, noise and estimator), rounded to it (GUM 7.2.6); --json prints full precision.\n" +
			"A symmetric cyclic loop is centred (the mean of B at its tips is removed and reported);\n" +
			"--keep-level keeps B as given. At least one full cycle is needed.",
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
			r, err := loopcsv.Analyze(d, args[0], loopcsv.AnalyzeOptions{NoCentre: noCentre})
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
	c.Flags().StringVar(&opt.HUnit, "h-unit", "", "unit of the H column: A/m, kA/m, Oe, kOe (default: from the header, else A/m)")
	c.Flags().StringVar(&opt.BUnit, "b-unit", "", "unit of the B column: T, mT, G, kG (default: from the header, else T)")
	c.Flags().BoolVar(&noCentre, "keep-level", false, "do not centre B (for loops with an absolute level, e.g. from a demagnetized start)")
	_ = c.RegisterFlagCompletionFunc("h-unit", fixedValues("A/m", "kA/m", "Oe", "kOe"))
	_ = c.RegisterFlagCompletionFunc("b-unit", fixedValues("T", "mT", "G", "kG"))
	return c
}
