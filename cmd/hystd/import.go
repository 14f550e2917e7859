package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
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
	var o importFlags
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
		RunE: func(cmd *cobra.Command, args []string) error { return o.run(cmd, args[0]) },
	}
	c.Flags().StringVar(&o.dataDir, "data", "hystd-data", "folder holding hystd.db (created if missing)")
	c.Flags().StringVar(&o.cfgPath, "config", "", "daemon config (kind: daemon): its store, fixtures and specimens, instead of --data")
	c.Flags().StringVar(&o.fixture, "fixture", "", "fixture file, or a fixture name of --config")
	c.Flags().StringVar(&o.specimen, "specimen", "", "specimen file, or a specimen id of --config")
	c.Flags().StringVar(&o.operator, "operator", "", "who imported it, recorded with the run")
	c.Flags().StringArrayVar(&o.calFiles, "calibration", nil, "calibration record (kind: calibration) of the recording's coil or instruments; repeatable")
	c.Flags().BoolVar(&o.asJSON, "json", false, "print one JSON object per stored loop with the keys of analyze --json")
	return c
}

// importFlags are the flags of `hystd import`.
type importFlags struct {
	dataDir, cfgPath, fixture, specimen, operator string
	asJSON                                        bool
	calFiles                                      []string
}

// importTarget is where an import goes: the store, the writer wrapping it
// (a grade's judge), the fixture and the specimen.
type importTarget struct {
	db string
	w  func(record.Writer) record.Writer
	fx config.Fixture
	sp config.Specimen
}

func (o *importFlags) run(cmd *cobra.Command, file string) error {
	if o.fixture == "" || o.specimen == "" {
		return &exitError{code: exitUsage, err: errors.New("--fixture and --specimen are required")}
	}
	data, err := os.ReadFile(file)
	if err != nil {
		return err
	}
	var t importTarget
	if o.cfgPath != "" {
		t, err = o.fromConfig(cmd)
	} else {
		t, err = o.fromFiles()
	}
	if err != nil {
		return err
	}
	// Read and process before the store is touched: a bad file
	// leaves no trace, not even an empty store.
	var cals []calrec.Record
	for _, f := range o.calFiles {
		r, err := calrec.Load(f)
		if err != nil {
			return err
		}
		cals = append(cals, r)
	}
	p, err := imports.Prepare(imports.Options{File: file, Data: data, Fixture: t.fx, Specimen: t.sp,
		Software: version, Operator: o.operator, Now: time.Now(), Calibrations: cals})
	if err != nil {
		return err
	}
	if o.cfgPath == "" {
		if err := os.MkdirAll(o.dataDir, 0o755); err != nil && !errors.Is(err, fs.ErrExist) {
			return err
		}
	}
	ctx := cmd.Context()
	st, err := store.Open(ctx, t.db)
	if err != nil {
		return err
	}
	defer st.Close()
	if err := p.Store(ctx, t.w(st)); err != nil {
		return err
	}
	return o.print(cmd.OutOrStdout(), p.Run, p.Loops, t.db)
}

// fromConfig takes the store, fixture, specimen and grade from --config.
func (o *importFlags) fromConfig(cmd *cobra.Command) (importTarget, error) {
	t := importTarget{w: func(x record.Writer) record.Writer { return x }}
	cfg, err := daemon.Load(o.cfgPath)
	if err != nil {
		return t, err
	}
	t.db = cfg.Config.Store.Path
	if lf, ok := cfg.Fixture(o.fixture); ok {
		t.fx = lf.Fixture
	} else if t.fx, err = config.LoadFixture(o.fixture); err != nil {
		return t, fmt.Errorf("--fixture %s: not a fixture of %s, and %w", o.fixture, o.cfgPath, err)
	}
	if t.sp, err = cfg.Registry.Specimen(o.specimen); err != nil {
		return t, fmt.Errorf("--specimen: %w", err)
	}
	gr, note := cfg.Registry.GradeOf(t.sp)
	if note != "" {
		fmt.Fprintln(cmd.ErrOrStderr(), "note:", note)
	}
	if gr != nil {
		t.w = func(x record.Writer) record.Writer {
			return grade.Writer{Writer: x, Grade: gr, Rule: cfg.Registry.Rule}
		}
	}
	return t, nil
}

// fromFiles takes the fixture and specimen files and the store in --data.
func (o *importFlags) fromFiles() (importTarget, error) {
	t := importTarget{w: func(x record.Writer) record.Writer { return x }}
	var err error
	if t.fx, err = config.LoadFixture(o.fixture); err != nil {
		return t, fmt.Errorf("--fixture: %w", err)
	}
	if t.sp, err = config.LoadSpecimen(o.specimen); err != nil {
		return t, fmt.Errorf("--specimen: %w", err)
	}
	t.db = filepath.Join(o.dataDir, "hystd.db")
	return t, nil
}

// print lists the stored loops: their figures, or (--json) one line each
// with analyze's keys.
func (o *importFlags) print(out io.Writer, run record.Run, loops []record.Loop, db string) error {
	if o.asJSON {
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
}
