package main

import (
	"fmt"
	"os"
	"path/filepath"

	"github.com/spf13/cobra"
	"github.com/spf13/cobra/doc"

	"hystd/buildinfo"
)

func init() { register(newGenDocsCmd) }

// newGenDocsCmd writes the man pages and shell completions the Debian
// package ships (.ci/package). Hidden: it is a build step, not a user task.
func newGenDocsCmd() *cobra.Command {
	var manDir, complDir string
	cmd := &cobra.Command{
		Use:    "gen-docs",
		Short:  "Write man pages (section 1) and bash/zsh/fish completions for packaging",
		Hidden: true,
		Args:   cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			root := cmd.Root()
			if manDir != "" {
				if err := os.MkdirAll(manDir, 0o755); err != nil {
					return err
				}
				hdr := &doc.GenManHeader{Title: "HYSTD", Section: "1", Source: "hystd " + buildinfo.Read().Version, Manual: "hystd manual"}
				// A fixed date keeps the pages reproducible: the commit's time when known.
				if t := buildinfo.Read().Time; !t.IsZero() {
					hdr.Date = &t
				}
				root.DisableAutoGenTag = true
				if err := doc.GenManTree(root, hdr, manDir); err != nil {
					return fmt.Errorf("man pages: %w", err)
				}
			}
			if complDir != "" {
				if err := os.MkdirAll(complDir, 0o755); err != nil {
					return err
				}
				for name, gen := range map[string]func(string) error{
					"hystd.bash": func(p string) error { return root.GenBashCompletionFileV2(p, true) },
					"_hystd":     root.GenZshCompletionFile,
					"hystd.fish": func(p string) error { return root.GenFishCompletionFile(p, true) },
				} {
					if err := gen(filepath.Join(complDir, name)); err != nil {
						return fmt.Errorf("completion %s: %w", name, err)
					}
				}
			}
			return nil
		},
	}
	cmd.Flags().StringVar(&manDir, "man", "", "folder for the man pages")
	cmd.Flags().StringVar(&complDir, "completions", "", "folder for hystd.bash, _hystd (zsh) and hystd.fish")
	return cmd
}
