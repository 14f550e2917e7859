package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/daemon"
	"hystd/acq/grade"
	"hystd/acq/imports"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/calib/units"
)

func init() { register(newImportCmd) }

// newImportCmd builds `hystd import FILE.csv --fixture F --specimen S`: a raw
// recording (t, I, psi, optional B_probe, temp, phase) processed like a live
// run's loops and stored as a run.
func newImportCmd() *cobra.Command {
	var dataDir, cfgPath, fixture, specimen, operator string
	var asJSON bool
	var calFiles []string
	c := &cobra.Command{
		Use:   "import FILE.csv --fixture F --specimen S [--data DIR | --config FILE] [--json]",
		Short: "Store a raw recording (t, I, psi) made elsewhere as a run, processed like a live one",
		Long: "Reads a raw recording with a header naming t (s), I (A) and psi (Wb-turns = V·s), optionally\n" +
			"B_probe (T), temp (°C) and phase (pre, sweep, post); a name may carry its unit (\"I (mA)\",\n" +
			"\"psi (uV s)\"). Without a phase column the static holds at the start and end are found from\n" +
			"the current standing still. Each step is processed as a live loop (drift from the holds,\n" +
			"baseline, closure, centring, geometry of the fixture and specimen, figures, uncertainty) and\n" +
			"stored as one run whose provenance names the file and its SHA-256. A bad file stores nothing.\n" +
			"--calibration FILE applies a calibration record (repeatable; a past-due one is a warning event).\n" +
			"--fixture is a fixture file, or a fixture name of --config; --specimen a specimen file, or an\n" +
			"id of the config's specimens (its loops are then judged against the specimen's grade).\n" +
			"--json prints one line per stored loop with analyze's keys.",
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if fixture == "" || specimen == "" {
				return &exitError{code: exitUsage, err: errors.New("--fixture and --specimen are required")}
			}
			data, err := os.ReadFile(args[0])
			if err != nil {
				return err
			}
			var db string
			var w func(record.Writer) record.Writer = func(x record.Writer) record.Writer { return x }
			var fx config.Fixture
			var sp config.Specimen
			if cfgPath != "" {
				cfg, err := daemon.Load(cfgPath)
				if err != nil {
					return err
				}
				db = cfg.Config.Store.Path
				if lf, ok := cfg.Fixture(fixture); ok {
					fx = lf.Fixture
				} else if fx, err = config.LoadFixture(fixture); err != nil {
					return fmt.Errorf("--fixture %s: not a fixture of %s, and %w", fixture, cfgPath, err)
				}
				if sp, err = cfg.Registry.Specimen(specimen); err != nil {
					return fmt.Errorf("--specimen: %w", err)
				}
				gr, note := cfg.Registry.GradeOf(sp)
				if note != "" {
					fmt.Fprintln(cmd.ErrOrStderr(), "note:", note)
				}
				if gr != nil {
					w = func(x record.Writer) record.Writer {
						return grade.Writer{Writer: x, Grade: gr, Rule: cfg.Registry.Rule}
					}
				}
			} else {
				if fx, err = config.LoadFixture(fixture); err != nil {
					return fmt.Errorf("--fixture: %w", err)
				}
				if sp, err = config.LoadSpecimen(specimen); err != nil {
					return fmt.Errorf("--specimen: %w", err)
				}
				db = filepath.Join(dataDir, "hystd.db")
			}
			// Read and process before the store is touched: a bad file
			// leaves no trace, not even an empty store.
			var cals []calrec.Record
			for _, f := range calFiles {
				r, err := calrec.Load(f)
				if err != nil {
					return err
				}
				cals = append(cals, r)
			}
			p, err := imports.Prepare(imports.Options{File: args[0], Data: data, Fixture: fx, Specimen: sp,
				Software: version, Operator: operator, Now: time.Now(), Calibrations: cals})
			if err != nil {
				return err
			}
			if cfgPath == "" {
				if err := os.MkdirAll(dataDir, 0o755); err != nil && !errors.Is(err, fs.ErrExist) {
					return err
				}
			}
			ctx := cmd.Context()
			st, err := store.Open(ctx, db)
			if err != nil {
				return err
			}
			defer st.Close()
			if err := p.Store(ctx, w(st)); err != nil {
				return err
			}
			run, loops := p.Run, p.Loops
			out := cmd.OutOrStdout()
			if asJSON {
				for _, l := range loops {
					b, err := json.Marshal(imports.Summary(l))
					if err != nil {
						return err
					}
					fmt.Fprintf(out, "%s\n", b)
				}
				return nil
			}
			fmt.Fprintf(out, "run %s: %s, %d loop(s), stored in %s\n", run.ID, run.RecipeText, len(loops), db)
			for _, l := range loops {
				fmt.Fprintf(out, "loop %d:\n", l.N)
				for _, f := range l.Figures {
					v, u := units.Rounded(f.Value, f.U)
					fmt.Fprintf(out, "  %-12s %s ± %s %s (k = 2)\n", f.Name, v, u, f.Unit)
				}
			}
			return nil
		},
	}
	c.Flags().StringVar(&dataDir, "data", "hystd-data", "folder holding hystd.db (created if missing)")
	c.Flags().StringVar(&cfgPath, "config", "", "daemon config (kind: daemon): its store, fixtures and specimens, instead of --data")
	c.Flags().StringVar(&fixture, "fixture", "", "fixture file, or a fixture name of --config")
	c.Flags().StringVar(&specimen, "specimen", "", "specimen file, or a specimen id of --config")
	c.Flags().StringVar(&operator, "operator", "", "who imported it, recorded with the run")
	c.Flags().StringArrayVar(&calFiles, "calibration", nil, "calibration record (kind: calibration) of the recording's coil or instruments; repeatable")
	c.Flags().BoolVar(&asJSON, "json", false, "print one JSON object per stored loop with the keys of analyze --json")
	return c
}
