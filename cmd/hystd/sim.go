package main

import (
	"encoding/json"
	"fmt"
	"net/http"
	"sort"
	"time"

	"github.com/spf13/cobra"

	"hystd/drivers/sim"
)

func init() { register(newSimCmd) }

// newSimCmd is `hystd sim [--bench FILE]`: it serves a simulated bench on
// pseudo-terminals, prints one JSON line {"role":…,"port":…} per instrument
// on stdout and serves until the command's context is cancelled
// (SIGINT/SIGTERM).
func newSimCmd() *cobra.Command {
	var benchFile, truthAddr, linksDir string
	cmd := &cobra.Command{
		Use:   "sim [--bench FILE] [--truth ADDR] [--links DIR]",
		Short: "Serve a simulated bench (supply, integrator, field meter, thermometer) on pseudo-terminals",
		Long: "sim serves each instrument of a simulated bench on its own pseudo-terminal, speaking\n" +
			"SCPI as its instrument profile says, backed by a physical model of the fixture and\n" +
			"specimen. It prints one JSON line per instrument, {\"role\":\"supply\",\"port\":\"/dev/pts/N\"},\n" +
			"and serves until interrupted. Without --bench it serves the embedded demo bench.\n" +
			"--truth 127.0.0.1:PORT serves the bench's ground truth at GET /truth (JSON: supply\n" +
			"current and output, faults fired by kind) and takes faults at POST /faults, on\n" +
			"loopback only. --links DIR makes DIR/supply, DIR/integrator, DIR/field_meter and\n" +
			"DIR/thermometer symbolic links to the ptys, so fixture files need no editing.\n" +
			"The bench drives no hardware; a dry run here says nothing about the energy a real\n" +
			"winding stores: on a real fixture follow the lab's interlocks and electrical practice.",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			var cfg sim.Config
			var err error
			if benchFile != "" {
				cfg, err = sim.LoadBench(benchFile)
			} else {
				cfg, err = sim.DefaultBench()
			}
			if err != nil {
				return &exitError{code: 2, err: err}
			}
			ctx := cmd.Context()
			b, err := sim.Start(ctx, cfg)
			if err != nil {
				return err
			}
			defer b.Close()
			ports := b.Ports()
			if linksDir != "" {
				made, err := sim.MakeLinks(linksDir, ports)
				if err != nil {
					return &exitError{code: 2, err: err}
				}
				defer sim.RemoveLinks(made, ports)
			}
			if truthAddr != "" {
				ln, err := sim.ListenLoopback(truthAddr)
				if err != nil {
					return &exitError{code: 2, err: err}
				}
				srv := &http.Server{Handler: sim.TruthHandler(b), ReadHeaderTimeout: 5 * time.Second}
				go srv.Serve(ln)
				defer srv.Close()
				fmt.Fprintf(cmd.ErrOrStderr(), "hystd sim: truth at http://%s/truth\n", ln.Addr())
			}
			roles := make([]string, 0, len(ports))
			for r := range ports {
				roles = append(roles, r)
			}
			sort.Strings(roles)
			enc := json.NewEncoder(cmd.OutOrStdout())
			for _, r := range roles {
				if err := enc.Encode(struct {
					Role string `json:"role"`
					Port string `json:"port"`
				}{r, ports[r]}); err != nil {
					return err
				}
			}
			fmt.Fprintf(cmd.ErrOrStderr(), "hystd sim: serving bench %q; interrupt to stop\n", cfg.Name)
			<-ctx.Done()
			return b.Close()
		},
	}
	cmd.Flags().StringVar(&benchFile, "bench", "", "bench file (kind: bench); default: the embedded demo bench")
	cmd.Flags().StringVar(&truthAddr, "truth", "", "serve GET /truth and POST /faults on this loopback address (HOST:PORT)")
	cmd.Flags().StringVar(&linksDir, "links", "", "make stable symbolic links DIR/<role> to the ptys")
	return cmd
}
