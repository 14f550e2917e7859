package main

import (
	"encoding/json"
	"fmt"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"hystd/acq/record"
	"hystd/acq/store"
)

func init() { register(newRunsCmd) }

// runRow is one line of `hystd runs`, also its --json form.
type runRow struct {
	ID       string `json:"id"`
	Started  string `json:"started"`
	Recipe   string `json:"recipe"`
	Fixture  string `json:"fixture"`
	Specimen string `json:"specimen"`
	Grade    string `json:"grade,omitempty"`
	State    string `json:"state"`
	Loops    int    `json:"loops"`
	Verdict  string `json:"verdict,omitempty"` // worst over the run's loops: fail, undecided, pass
	// Revision is the latest revision, whose loops, specimen and verdict
	// the row shows; Revisions lists every one of a re-processed run.
	Revision  int           `json:"revision"`
	Revisions []revisionRow `json:"revisions,omitempty"`
}

// revisionRow is one revision of a re-processed run in `hystd runs --json`.
type revisionRow struct {
	N        int    `json:"n"`
	At       string `json:"at"`
	By       string `json:"by"`
	Specimen string `json:"specimen"`
	Change   string `json:"change,omitempty"`
}

func newRunsCmd() *cobra.Command {
	var dataDir, cfgPath, recipe, state string
	var f record.RunFilter
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "runs [--data DIR | --config FILE] [filters]",
		Short: "List stored runs, newest first, with specimen, recipe and verdict",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
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
			switch record.State(state) {
			case "", record.Queued, record.Running, record.Finished, record.Aborted, record.Failed:
				f.State = record.State(state)
			default:
				return fmt.Errorf("--state %q: one of queued, running, finished, aborted, failed", state)
			}
			runs, err := st.Runs(ctx, f)
			if err != nil {
				return err
			}
			rows := []runRow{}
			for _, r := range runs {
				if recipe != "" && r.Recipe != recipe {
					continue
				}
				loops, err := st.Loops(ctx, r.ID)
				if err != nil {
					return err
				}
				var vs []record.Verdict
				for _, l := range loops {
					vs = append(vs, l.Verdicts...)
				}
				revs, err := st.Revisions(ctx, r.ID)
				if err != nil {
					return err
				}
				last := revs[len(revs)-1]
				row := runRow{ID: r.ID, Recipe: r.Recipe, Fixture: last.Fixture, Specimen: last.Specimen, Grade: last.Grade,
					State: string(r.State), Loops: len(loops), Verdict: string(record.Worst(vs)), Revision: last.N}
				if len(revs) > 1 {
					for _, v := range revs {
						row.Revisions = append(row.Revisions, revisionRow{N: v.N, At: v.At.Local().Format(time.DateTime), By: v.By, Specimen: v.Specimen, Change: v.Change})
					}
				}
				if !r.Started.IsZero() {
					row.Started = r.Started.Local().Format(time.DateTime)
				}
				rows = append(rows, row)
			}
			out := cmd.OutOrStdout()
			if asJSON {
				enc := json.NewEncoder(out)
				enc.SetIndent("", "  ")
				return enc.Encode(rows)
			}
			if len(rows) == 0 {
				fmt.Fprintln(out, "no runs match")
				return nil
			}
			tw := tabwriter.NewWriter(out, 2, 4, 2, ' ', 0)
			fmt.Fprintln(tw, "started\trun\trecipe\tspecimen\tgrade\tstate\tloops\tverdict\trevision")
			for _, r := range rows {
				rev := "1"
				if len(r.Revisions) > 0 {
					// e.g. "2 (by alba)": the row shows the latest.
					rev = fmt.Sprintf("%d (by %s)", r.Revision, r.Revisions[len(r.Revisions)-1].By)
				}
				fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%d\t%s\t%s\n", dash(r.Started), r.ID, r.Recipe, r.Specimen, dash(r.Grade), r.State, r.Loops, dash(r.Verdict), rev)
			}
			return tw.Flush()
		},
	}
	cmd.Flags().StringVar(&dataDir, "data", "hystd-data", "folder holding hystd.db")
	cmd.Flags().StringVar(&cfgPath, "config", "", "daemon config (kind: daemon) whose store.path to read, instead of --data")
	cmd.Flags().StringVar(&f.Specimen, "specimen", "", "only runs of this specimen id")
	cmd.Flags().StringVar(&f.Fixture, "fixture", "", "only runs on this fixture")
	cmd.Flags().StringVar(&f.Material, "material", "", "only runs of this material")
	cmd.Flags().StringVar(&recipe, "recipe", "", "only runs of this recipe name")
	cmd.Flags().StringVar(&state, "state", "", "only runs in this state: queued, running, finished, aborted, failed")
	cmd.Flags().IntVar(&f.Limit, "limit", 0, "at most N runs (default 100)")
	cmd.Flags().BoolVar(&asJSON, "json", false, "print a JSON array instead of a table")
	return cmd
}
