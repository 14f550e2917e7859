package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/spf13/cobra"
	"golang.org/x/term"

	"hystd/acq/export"
	"hystd/acq/record"
	"hystd/acq/store"
)

func init() { register(newExportCmd) }

func newExportCmd() *cobra.Command {
	var (
		dataDir, cfgPath, format, out string
		loop, revision                int
		all                           bool
		style                         export.PlotStyle
	)
	names := make([]string, 0, 5)
	for _, f := range export.Formats() {
		names = append(names, string(f))
	}
	cmd := &cobra.Command{
		Use:   "export RUN",
		Short: "Write a stored run as " + strings.Join(names, ", "),
		Long: "export reads run RUN from DIR/hystd.db (or the store of a daemon config, --config FILE) and writes it to standard output, or to FILE with -o:\n" +
			"  csv   one row per point of the loop: " + strings.Join(export.CSVHeader, ",") + "\n" +
			"        (t s, setpoint A or A/m, I A, V V, psi Wb, B_probe T, temp °C, H A/m, B T, J T;\n" +
			"        a missing channel is an empty cell); readable by hystd analyze. --all-samples adds\n" +
			"        the drift-hold samples around the sweep, which have no H, B, J\n" +
			"  json  the run with its provenance, loops, figures, corrections, samples and events\n" +
			"  lp    line protocol, the same points the forwarder sends to the time-series database\n" +
			"  svg   the B–H plot\n" +
			"  png   the B–H plot as an image\n" +
			"        --y J plots J = B − μ0·H, --units cgs labels H in Oe and B, J in G or kG,\n" +
			"        --quadrant 2 shows the demagnetization curve (H ≤ 0, B ≥ 0) with B, J and (BH)max;\n" +
			"        the same choices as the API's plot query (?y=&units=&quadrant=)\n" +
			"A re-processed run (hystd reprocess) is exported at its latest revision; --revision N picks another.\n" +
			"The store is only read. With -o the file appears only when the export succeeded.",
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			f, err := export.ParseFormat(format)
			if err != nil {
				return &exitError{code: 2, err: fmt.Errorf("--format: %w", err)}
			}
			if loop < 0 {
				return &exitError{code: 2, err: fmt.Errorf("--loop %d: loops are numbered from 1", loop)}
			}
			var o export.Options
			if revision < 0 {
				return &exitError{code: 2, err: fmt.Errorf("--revision %d: revisions are numbered from 1", revision)}
			}
			o.Loop, o.AllSamples, o.Revision = loop, all, revision
			if o.Plot, err = style.Options(); err != nil {
				return &exitError{code: 2, err: fmt.Errorf("--%w", err)}
			}
			if f != export.SVG && f != export.PNG {
				for _, name := range []string{"y", "units", "quadrant"} {
					if cmd.Flags().Changed(name) {
						return &exitError{code: 2, err: fmt.Errorf("--%s: applies to --format svg or png, not %s", name, f)}
					}
				}
			}
			if out == "" && f == export.PNG {
				if fd, ok := cmd.OutOrStdout().(*os.File); ok && term.IsTerminal(int(fd.Fd())) {
					return &exitError{code: 2, err: errors.New("--format png: refusing to write an image to the terminal; use -o FILE")}
				}
			}
			return runExport(cmd.Context(), cmd.OutOrStdout(), dataDir, cfgPath, args[0], f, o, out)
		},
	}
	cmd.Flags().StringVar(&dataDir, "data", "hystd-data", "folder holding hystd.db")
	cmd.Flags().StringVar(&cfgPath, "config", "", "daemon config (kind: daemon) whose store.path to read, instead of --data")
	cmd.Flags().StringVar(&format, "format", "csv", "output format: "+strings.Join(names, ", "))
	cmd.Flags().IntVar(&loop, "loop", 0, "export only loop N (1-based); 0: every loop")
	cmd.Flags().IntVar(&revision, "revision", 0, "export revision N of a re-processed run (1: as recorded); 0: the latest")
	cmd.Flags().StringVarP(&out, "output", "o", "", "write to FILE instead of standard output")
	cmd.Flags().BoolVar(&all, "all-samples", false, "csv: include the drift-hold samples without H, B, J")
	// -y as well: cobra's completion looks a one-letter flag up by its shorthand.
	cmd.Flags().StringVarP(&style.Y, "y", "y", "B", "svg, png: ordinate, B or J")
	cmd.Flags().StringVar(&style.Units, "units", "si", "svg, png: si (A/m, T) or cgs (Oe, G)")
	cmd.Flags().StringVar(&style.Quadrant, "quadrant", "", "svg, png: 2 for the second quadrant only")
	cmd.ValidArgsFunction = completeRunIDs(&dataDir)
	_ = cmd.RegisterFlagCompletionFunc("format", fixedValues(names...))
	_ = cmd.RegisterFlagCompletionFunc("y", fixedValues("B", "J"))
	_ = cmd.RegisterFlagCompletionFunc("units", fixedValues("si", "cgs"))
	_ = cmd.RegisterFlagCompletionFunc("quadrant", fixedValues("2"))
	return cmd
}

func runExport(ctx context.Context, stdout io.Writer, dataDir, cfgPath, run string, f export.Format, o export.Options, out string) error {
	db, err := storePath(dataDir, cfgPath)
	if err != nil {
		return err
	}
	st, err := store.Open(ctx, db)
	if err != nil {
		return err
	}
	defer st.Close()
	// Export into memory first: nothing is written unless the whole export succeeds.
	var buf bytes.Buffer
	if err := export.Write(ctx, &buf, st, run, f, o); err != nil {
		if errors.Is(err, record.ErrNotFound) {
			return &exitError{code: exitNotFound, err: err}
		}
		return err
	}
	if out == "" {
		_, err := stdout.Write(buf.Bytes())
		return err
	}
	return writeAtomic(out, buf.Bytes())
}
