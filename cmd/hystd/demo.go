package main

import (
	"github.com/spf13/cobra"

	"hystd/acq/demo"
)

func init() { register(newDemoCmd) }

func newDemoCmd() *cobra.Command {
	var dataDir string
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Run the whole job once on the simulated bench",
		Long: "demo starts a simulated bench on pseudo-terminals, runs the demo recipe on the demo ring\n" +
			"specimen through the real serial drivers, stores the run in DIR/hystd.db, writes a plot\n" +
			"DIR/RUN.svg and prints the figures.",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			_, err := demo.Run(cmd.Context(), demo.Options{
				DataDir:  dataDir,
				Out:      cmd.OutOrStdout(),
				Software: version,
			})
			return err
		},
	}
	cmd.Flags().StringVar(&dataDir, "data", "hystd-data", "folder for hystd.db and the plots")
	return cmd
}
