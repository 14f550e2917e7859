package main

import (
	"context"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"

	"hystd/acq/record"
	"hystd/acq/store"
)

// openStoreIfExists opens DIR/hystd.db only when it is there (a typo in
// --data must not create an empty store).
func openStoreIfExists(ctx context.Context, dataDir string) (*store.Store, error) {
	p := filepath.Join(dataDir, "hystd.db")
	if _, err := os.Stat(p); err != nil {
		return nil, err
	}
	return store.Open(ctx, p)
}

// completeRunIDs offers the ids of the newest runs in the store of --data
// (read when the shell asks; nothing when there is no store).
func completeRunIDs(dataDir *string) func(*cobra.Command, []string, string) ([]string, cobra.ShellCompDirective) {
	return func(cmd *cobra.Command, args []string, _ string) ([]string, cobra.ShellCompDirective) {
		if len(args) > 0 {
			return nil, cobra.ShellCompDirectiveNoFileComp
		}
		ctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
		defer cancel()
		st, err := openStoreIfExists(ctx, *dataDir)
		if err != nil {
			return nil, cobra.ShellCompDirectiveNoFileComp
		}
		defer st.Close()
		runs, err := st.Runs(ctx, record.RunFilter{Limit: 200})
		if err != nil {
			return nil, cobra.ShellCompDirectiveNoFileComp
		}
		ids := make([]string, 0, len(runs))
		for _, r := range runs {
			ids = append(ids, r.ID+"\t"+r.Specimen+" "+string(r.State))
		}
		return ids, cobra.ShellCompDirectiveNoFileComp
	}
}

// fixedValues completes a flag from a fixed list.
func fixedValues(vals ...string) func(*cobra.Command, []string, string) ([]string, cobra.ShellCompDirective) {
	return func(*cobra.Command, []string, string) ([]string, cobra.ShellCompDirective) {
		return vals, cobra.ShellCompDirectiveNoFileComp
	}
}
