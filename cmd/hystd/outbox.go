package main

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"hystd/acq/daemon"
	"hystd/acq/outbox"
	"hystd/acq/store"
)

func init() { register(newOutboxCmd) }

// exitNothing is the exit status of `outbox requeue` when no quarantined
// loop matched.
const exitNothing = 4

func newOutboxCmd() *cobra.Command {
	var dataDir, cfgPath string
	cmd := &cobra.Command{
		Use:   "outbox",
		Short: "List loops the time-series server refused, and send them again",
		Long: "The forwarder quarantines a loop when the server refuses it for good (HTTP 400 or 422: a\n" +
			"wrong URL path, bucket or field type). The loop stays in the store, the record of truth.\n" +
			"Fix the cause (the influx section of the config), then requeue: the running daemon's\n" +
			"forwarder sends requeued loops on its next pass (within its poll_interval).\n" +
			"The store is DIR/hystd.db (--data), or the store.path of a daemon config (--config).\n" +
			"Exit status: 0 done, 1 failed, 2 usage, 4 no quarantined loop matched.",
	}
	cmd.PersistentFlags().StringVar(&dataDir, "data", "hystd-data", "folder holding hystd.db")
	cmd.PersistentFlags().StringVar(&cfgPath, "config", "", "daemon config file (kind: daemon): use its store.path")
	open := func(cmd *cobra.Command) (*store.Store, error) {
		path := filepath.Join(dataDir, "hystd.db")
		if cfgPath != "" {
			cfg, err := daemon.Load(cfgPath)
			if err != nil {
				return nil, &exitError{code: 2, err: err}
			}
			path = cfg.Config.Store.Path
		}
		if _, err := os.Stat(path); err != nil {
			return nil, fmt.Errorf("store: %w", err)
		}
		return store.Open(cmd.Context(), path)
	}
	list := &cobra.Command{
		Use:   "list",
		Short: "List quarantined loops with the server's reason",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			st, err := open(cmd)
			if err != nil {
				return err
			}
			defer st.Close()
			q, err := outbox.List(cmd.Context(), st)
			if err != nil {
				return err
			}
			out := cmd.OutOrStdout()
			if len(q) == 0 {
				fmt.Fprintln(out, "no quarantined loop")
				return nil
			}
			tw := tabwriter.NewWriter(out, 0, 4, 2, ' ', 0)
			fmt.Fprintln(tw, "RUN\tLOOP\tSINCE\tREASON")
			for _, e := range q {
				fmt.Fprintf(tw, "%s\t%d\t%s\t%s\n", e.RunID, e.Loop, e.Updated.UTC().Format(time.RFC3339), e.LastError)
			}
			return tw.Flush()
		},
	}
	var all bool
	requeue := &cobra.Command{
		Use:   "requeue RUN | requeue --all",
		Short: "Make the quarantined loops of RUN (or all) pending again",
		Args: func(cmd *cobra.Command, args []string) error {
			if all == (len(args) == 1) && len(args) <= 1 {
				return errors.New("give either RUN or --all")
			}
			return cobra.MaximumNArgs(1)(cmd, args)
		},
		ValidArgsFunction: completeRunIDs(&dataDir),
		RunE: func(cmd *cobra.Command, args []string) error {
			st, err := open(cmd)
			if err != nil {
				return err
			}
			defer st.Close()
			run := ""
			if !all {
				run = args[0]
			}
			done, err := outbox.Requeue(cmd.Context(), st, run)
			if errors.Is(err, outbox.ErrNothing) {
				return &exitError{code: exitNothing, err: err}
			}
			for _, e := range done {
				fmt.Fprintf(cmd.OutOrStdout(), "requeued run %s loop %d\n", e.RunID, e.Loop)
			}
			return err
		},
	}
	requeue.Flags().BoolVar(&all, "all", false, "requeue every quarantined loop")
	cmd.AddCommand(list, requeue)
	return cmd
}
