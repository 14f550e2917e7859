package main

import (
	"errors"
	"fmt"
	"log/slog"
	"net"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"

	"hystd/acq/api"
	"hystd/acq/demo"
	"hystd/acq/influx"
	"hystd/acq/live"
	"hystd/acq/store"
	"hystd/drivers/clock"
)

func init() { register(newDemoCmd) }

// exitForward is the demo's exit status when the forward it was asked for
// delivered nothing or the server refused loops.
const exitForward = 3

func demoExit(err error) error {
	var fe *demo.ForwardError
	if errors.As(err, &fe) {
		return &exitError{code: exitForward, err: err}
	}
	return err
}

func newDemoCmd() *cobra.Command {
	var dataDir, serveAddr, speed, capture, sweep string
	var ic influx.Config
	var tags []string
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Run the whole job once on the simulated bench",
		Long: "demo starts a simulated bench on pseudo-terminals, runs the demo recipe on the demo ring\n" +
			"specimen through the real serial drivers, stores the run in DIR/hystd.db, writes a plot\n" +
			"DIR/RUN.svg and prints the figures.\n\n" +
			"With --serve ADDR the review page and the read-only API are served on ADDR (for example\n" +
			"127.0.0.1:8740) from the start, so the live sweep can be watched, and after the run until\n" +
			"SIGINT or SIGTERM.\n\n" +
			"--speed real (the default) paces the sweep as a real bench would; --speed max runs the bench,\n" +
			"the drivers and the engine in simulated time: the same bytes through the same ports, but time\n" +
			"jumps to each next setpoint, so the run takes as long as the computer needs and, for the same\n" +
			"bench, stores the same samples every time.\n\n" +
			"With --influx-url the loops are also sent to a time-series database (--influx-api v2 or v1,\n" +
			"--influx-tag NAME=VALUE for static tags). Progress and figures go to stdout, logs to stderr.\n" +
			"Exit status: 0 ok, 1 failed, 2 usage, 3 the forward asked for delivered nothing or the\n" +
			"server refused loops (the run is stored; see hystd outbox).",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			out := cmd.OutOrStdout()
			if capture != "polled" && capture != "buffered" {
				return &exitError{code: exitUsage, err: fmt.Errorf("--capture %q: want polled or buffered", capture)}
			}
			if sweep != "steps" && (sweep != "ramp" || capture != "buffered") {
				return &exitError{code: exitUsage, err: fmt.Errorf("--sweep %q: want steps, or ramp with --capture buffered", sweep)}
			}
			opts := demo.Options{DataDir: dataDir, Out: out, Software: version, Capture: capture, Sweep: sweep, Operator: osUser(),
				Log: slog.New(slog.NewTextHandler(cmd.ErrOrStderr(), &slog.HandlerOptions{Level: slog.LevelWarn}))}
			slog.SetDefault(opts.Log) // the forwarder logs through the default logger: stderr
			switch speed {
			case "real":
			case "max":
				opts.Clock = clock.NewSim(time.Now())
			default:
				return &exitError{code: exitUsage, err: fmt.Errorf("--speed %q: want real or max", speed)}
			}
			if ic.URL != "" || ic.Bucket != "" {
				ic.Kind = "influx"
				for _, t := range tags {
					k, v, err := influx.ParseTag(t)
					if err != nil {
						return &exitError{code: exitUsage, err: fmt.Errorf("--influx-tag %w", err)}
					}
					if ic.Tags == nil {
						ic.Tags = map[string]string{}
					}
					ic.Tags[k] = v
				}
				ic = ic.WithDefaults()
				if err := ic.Validate(); err != nil {
					return &exitError{code: 2, err: fmt.Errorf("--influx-*: %w", err)}
				}
				opts.Influx = &ic
			}
			if serveAddr == "" {
				_, err := demo.Run(ctx, opts)
				return demoExit(err)
			}
			if err := os.MkdirAll(dataDir, 0o755); err != nil {
				return err
			}
			st, err := store.Open(ctx, filepath.Join(dataDir, "hystd.db"))
			if err != nil {
				return err
			}
			defer st.Close()
			hub := live.NewHub(0)
			h, err := api.New(api.Options{Reader: st, Live: hub, Version: version})
			if err != nil {
				return err
			}
			ln, err := net.Listen("tcp", serveAddr)
			if err != nil {
				return fmt.Errorf("--serve: %w", err)
			}
			done := make(chan error, 1)
			go func() { done <- api.ServeListener(ctx, ln, h) }()
			fmt.Fprintf(out, "review page: http://%s/ (read-only)\n", ln.Addr())
			opts.Store, opts.Live = st, hub
			_, runErr := demo.Run(ctx, opts)
			if runErr != nil && ctx.Err() == nil {
				fmt.Fprintln(cmd.ErrOrStderr(), "hystd: demo:", runErr)
			}
			if ctx.Err() == nil {
				fmt.Fprintf(out, "serving http://%s/ until SIGINT or SIGTERM\n", ln.Addr())
			}
			if err := <-done; err != nil {
				return errors.Join(runErr, err)
			}
			if ctx.Err() != nil {
				return nil // stopped by a signal after (or during) the demo: a clean stop
			}
			return demoExit(runErr)
		},
	}
	cmd.Flags().StringVar(&dataDir, "data", "hystd-data", "folder for hystd.db and the plots")
	cmd.Flags().StringVar(&ic.URL, "influx-url", "", "also send the loops to this time-series database (e.g. http://127.0.0.1:8086; a path is kept, e.g. a cluster's /insert/0/influx)")
	cmd.Flags().StringVar(&ic.API, "influx-api", "v2", "write protocol: v2 (/api/v2/write) or v1 (InfluxDB 1.x /write)")
	cmd.Flags().StringArrayVar(&tags, "influx-tag", nil, "static tag NAME=VALUE on every point (repeatable), e.g. site=north-lab")
	_ = cmd.RegisterFlagCompletionFunc("influx-api", fixedValues("v2", "v1"))
	cmd.Flags().StringVar(&ic.Org, "influx-org", "", "organization for --influx-url")
	cmd.Flags().StringVar(&ic.Bucket, "influx-bucket", "", "bucket for --influx-url")
	cmd.Flags().StringVar(&ic.TokenFile, "influx-token-file", "", "file holding the API token (else $"+influx.DefaultTokenEnv+")")
	cmd.Flags().StringVar(&capture, "capture", "polled", "polled: every channel read once per setpoint; buffered: the integrator and field meter sample on their own clocks ten times as often during each sweep")
	cmd.Flags().StringVar(&sweep, "sweep", "steps", "steps: the supply is stepped from setpoint to setpoint; ramp (with --capture buffered): the supply ramps continuously from tip to tip at a programmed rate (caution: on a real fixture the program drives the winding's current itself)")
	cmd.Flags().StringVar(&speed, "speed", "real", "real: the sweep's own pace; max: simulated time, as fast as the computer allows")
	cmd.Flags().StringVar(&serveAddr, "serve", "", "also serve the review page and API on this address (e.g. 127.0.0.1:8740) until SIGINT/SIGTERM")
	return cmd
}
