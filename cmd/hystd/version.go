package main

import (
	"encoding/json"
	"fmt"

	"github.com/spf13/cobra"

	"hystd/buildinfo"
)

func init() { register(newVersionCmd) }

func newVersionCmd() *cobra.Command {
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "version",
		Short: "Print the version, VCS revision, modified flag and Go version of this build",
		Long: "version prints which build this is: the release or module version, the VCS revision it\n" +
			"was built from, whether the tree had uncommitted changes, and the Go toolchain. The same\n" +
			"text as one line is stored with every run (its software field).",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			in := buildinfo.Read()
			if asJSON {
				enc := json.NewEncoder(cmd.OutOrStdout())
				enc.SetIndent("", "  ")
				return enc.Encode(map[string]any{
					"version": in.Version, "revision": in.Revision, "modified": in.Modified,
					"go": in.GoVersion, "commit_time": in.Time, "software": in.Software(),
				})
			}
			_, err := fmt.Fprint(cmd.OutOrStdout(), in.String())
			return err
		},
	}
	cmd.Flags().BoolVar(&asJSON, "json", false, "print as JSON")
	return cmd
}
