package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os/user"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"hystd/acq/config"
	"hystd/acq/daemon"
	"hystd/acq/imports"
	"hystd/acq/record"
	"hystd/acq/reprocess"
	"hystd/acq/store"
	"hystd/calib/loopcsv"
	"hystd/calib/units"
)

func init() { register(newReprocessCmd) }

// reprocessJSON is the --json output of `hystd reprocess`.
type reprocessJSON struct {
	RunID    string            `json:"run_id"`
	Revision int               `json:"revision"`
	By       string            `json:"by"`
	Change   []string          `json:"change"`
	Loops    []loopcsv.Summary `json:"loops"` // per loop, the keys of `hystd analyze --json`
}

// newReprocessCmd builds `hystd reprocess RUN [--specimen S] [--fixture F]`:
// a stored run recomputed from its raw samples with a changed specimen or
// fixture, stored as its next revision.
func newReprocessCmd() *cobra.Command {
	var dataDir, cfgPath, fixture, specimen, by string
	var asJSON bool
	c := &cobra.Command{
		Use:   "reprocess RUN [--specimen S] [--fixture F] [--by NAME] [--data DIR | --config FILE] [--json]",
		Short: "Recompute a stored run from its raw samples with a corrected specimen or fixture, as a new revision",
		Long: "Recomputes every loop of run RUN from its stored raw samples, through the same processing as when it\n" +
			"was recorded, with --specimen and/or --fixture in place of those of its latest revision (e.g. a\n" +
			"corrected mass, cross-section or search-coil area). The result is stored as the run's next revision;\n" +
			"the earlier revisions are kept and stay readable (export --revision N, the API's ?revision=N, the\n" +
			"page). The revision records what changed and who made the change (--by, default the OS user).\n" +
			"--specimen is a specimen file, or an id of --config's specimens (loops are then judged against its\n" +
			"grade); --fixture a fixture file, or a fixture name of --config. A live run that used calibration\n" +
			"records is re-processed with them, taken from --config's calibrations folder; it is refused when\n" +
			"one is missing there or differs from what the run recorded. No instrument is touched.",
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if fixture == "" && specimen == "" {
				return &exitError{code: exitUsage, err: errors.New("give --specimen and/or --fixture: what changed")}
			}
			if by == "" {
				if u, err := user.Current(); err == nil {
					by = u.Username
				}
			}
			o := reprocess.Options{RunID: args[0], By: by, Now: time.Now()}
			var db string
			var err error
			if cfgPath != "" {
				db, err = reprocessFromConfig(cfgPath, fixture, specimen, &o)
			} else {
				db, err = reprocessFromFiles(dataDir, fixture, specimen, &o)
			}
			if err != nil {
				return err
			}
			ctx := cmd.Context()
			st, err := store.Open(ctx, db)
			if err != nil {
				return err
			}
			defer st.Close()
			res, err := reprocess.Run(ctx, st, o)
			if errors.Is(err, record.ErrNotFound) {
				return &exitError{code: exitNotFound, err: err}
			}
			if err != nil {
				return err
			}
			out := cmd.OutOrStdout()
			if asJSON {
				return printReprocessJSON(out, res)
			}
			return printReprocess(ctx, out, st, res, db)
		},
	}
	c.Flags().StringVar(&dataDir, "data", "hystd-data", "folder holding hystd.db")
	c.Flags().StringVar(&cfgPath, "config", "", "daemon config (kind: daemon): its store, fixtures and specimens, instead of --data")
	c.Flags().StringVar(&fixture, "fixture", "", "fixture file, or a fixture name of --config, replacing the run's")
	c.Flags().StringVar(&specimen, "specimen", "", "specimen file, or a specimen id of --config, replacing the run's")
	c.Flags().StringVar(&by, "by", "", "who makes the change, recorded with the revision (default: the OS user)")
	c.Flags().BoolVar(&asJSON, "json", false, "print the revision and, per loop, the keys of analyze --json")
	c.ValidArgsFunction = completeRunIDs(&dataDir)
	return c
}

// reprocessFromConfig fills o's fixture, specimen and judge from the daemon
// config at cfgPath (a fixture name of it, or else a fixture file; a
// specimen id of its registry) and returns its store's path.
func reprocessFromConfig(cfgPath, fixture, specimen string, o *reprocess.Options) (string, error) {
	cfg, err := daemon.Load(cfgPath)
	if err != nil {
		return "", err
	}
	db := cfg.Config.Store.Path
	o.Judge = daemon.Judge(cfg)
	o.Calibrations, o.CalibrationsDir = cfg.Calibrations, cfg.Config.Calibrations
	if fixture != "" {
		if lf, ok := cfg.Fixture(fixture); ok {
			o.Fixture = &lf.Fixture
		} else if fx, err := config.LoadFixture(fixture); err == nil {
			o.Fixture = &fx
		} else {
			return "", fmt.Errorf("--fixture %s: not a fixture of %s, and %w", fixture, cfgPath, err)
		}
	}
	if specimen != "" {
		sp, err := cfg.Registry.Specimen(specimen)
		if err != nil {
			return "", fmt.Errorf("--specimen: %w", err)
		}
		o.Specimen = &sp
	}
	return db, nil
}

// reprocessFromFiles fills o's fixture and specimen from files and returns
// the path of the store in dataDir.
func reprocessFromFiles(dataDir, fixture, specimen string, o *reprocess.Options) (string, error) {
	if fixture != "" {
		fx, err := config.LoadFixture(fixture)
		if err != nil {
			return "", fmt.Errorf("--fixture: %w", err)
		}
		o.Fixture = &fx
	}
	if specimen != "" {
		sp, err := config.LoadSpecimen(specimen)
		if err != nil {
			return "", fmt.Errorf("--specimen: %w", err)
		}
		o.Specimen = &sp
	}
	return storePath(dataDir, "")
}

// printReprocessJSON prints res as reprocessJSON.
func printReprocessJSON(out io.Writer, res reprocess.Result) error {
	j := reprocessJSON{RunID: res.Run.ID, Revision: res.Revision.N, By: res.Revision.By,
		Change: strings.Split(res.Revision.Change, "\n"), Loops: []loopcsv.Summary{}}
	for _, l := range res.Loops {
		j.Loops = append(j.Loops, imports.Summary(l))
	}
	enc := json.NewEncoder(out)
	enc.SetIndent("", "  ")
	return enc.Encode(j)
}

// printReprocess prints the stored revision res: what changed, the events
// that were not info, and per loop its figures beside the previous
// revision's (read from st).
func printReprocess(ctx context.Context, out io.Writer, st *store.Store, res reprocess.Result, db string) error {
	fmt.Fprintf(out, "run %s: revision %d by %s, stored in %s\n", res.Run.ID, res.Revision.N, res.Revision.By, db)
	for _, ch := range strings.Split(res.Revision.Change, "\n") {
		fmt.Fprintf(out, "  changed %s\n", ch)
	}
	for _, e := range res.Events {
		if e.Level != "info" {
			fmt.Fprintf(out, "  %s: %s\n", e.Level, e.Text)
		}
	}
	for _, l := range res.Loops {
		prev, err := st.LoopOf(ctx, res.Run.ID, l.N, res.Revision.N-1)
		if err != nil {
			return err
		}
		was := map[string]record.Figure{}
		for _, f := range prev.Figures {
			was[f.Name] = f
		}
		fmt.Fprintf(out, "loop %d (revision %d → %d):\n", l.N, res.Revision.N-1, res.Revision.N)
		for _, f := range l.Figures {
			v, u := units.Rounded(f.Value, f.U)
			line := fmt.Sprintf("  %-12s %s ± %s %s (k = 2)", f.Name, v, u, f.Unit)
			if p, ok := was[f.Name]; ok {
				pv, pu := units.Rounded(p.Value, p.U)
				line += fmt.Sprintf("   was %s ± %s", pv, pu)
			}
			fmt.Fprintln(out, line)
		}
	}
	return nil
}
