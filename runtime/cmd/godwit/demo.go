package main

import (
	"fmt"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"github.com/godwit-fusion/godwit/examples/scenario"
	"github.com/godwit-fusion/godwit/runtime/demo"
)

func init() { commands = append(commands, newDemoCmd) }

func newDemoCmd() *cobra.Command {
	var (
		out, scen, logLevel string
		seconds, speed      float64
		seed                uint64
	)
	cmd := &cobra.Command{
		Use:   "demo [--out DIR] [--seconds N] [--seed N]",
		Short: "Run the whole pipeline on an embedded broker and score it",
		Long: `demo needs nothing but this binary. It starts an MQTT broker on a free
loopback port, runs the fusion daemon against it with the campus-shuttle
configuration, plays the simulated campus-shuttle scene into the broker live
(faster than real time, so the whole demo ends within about 30 s), collects
the published tracks and health, scores them against the scene's ground truth
and prints a summary table. It writes into DIR:

  report.html (+ PNG plots)   plan view, GOSPA over time, NIS per sensor, latency
  tracks.jsonl, health.jsonl  what the daemon published, as received
  summary.json                the run's counters and the evaluation
  recording.jsonl, truth.jsonl the scene, for "godwit replay --truth"

The scene's time steps are kept: every t_ns is shifted by one constant so the
first message looks measured when it is sent, and --speed only spaces the
messages closer together on the wall clock.`,
		Example: `  godwit demo
  godwit demo --out /tmp/demo --seconds 20 --seed 3
  godwit demo --speed 1            # real time: 60 s`,
		Args: usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			if seconds < 0 {
				return usagef("--seconds is %g; it must be > 0 (default: the scenario's duration)", seconds)
			}
			if speed < 0 {
				return usagef("--speed is %g; it must be > 0 (default: fit the scene into %s)", speed, demo.DefaultWall)
			}
			if _, err := scenario.Open(scen); err != nil {
				return usageError{err}
			}
			log, err := buildLogger(logLevel, cmd.ErrOrStderr())
			if err != nil {
				return err
			}
			defer func() { _ = log.Sync() }()
			bar := newProgress(cmd.ErrOrStderr(), "demo")
			res, err := demo.Run(cmd.Context(), demo.Options{
				Out: out, Scenario: scen, Seconds: seconds, Seed: seed, SeedSet: cmd.Flags().Changed("seed"),
				Speed: speed, Logger: log, Progress: bar.set})
			bar.done()
			if err != nil {
				return err
			}
			w := cmd.OutOrStdout()
			fmt.Fprintf(w, "godwit demo: %s, seed %d, %g s of scene time at %.3g× in %s wall time\n",
				res.Scenario, res.Seed, res.Seconds, res.Speed, res.Wall.Round(1e8))
			fmt.Fprintf(w, "  %d messages published, %d accepted by the daemon, %d tracks messages and %d health messages received\n",
				res.Published, res.Daemon.Pipeline.Accepted, res.TracksMsgs, res.Health.Messages)
			res.Scored.PrintTable(w, demo.Figures{TracksConfirmed: res.Daemon.Pipeline.Confirmed, Alerts: res.Health.Alerts()})
			fmt.Fprintf(w, "report: %s\n", filepath.Join(out, res.Files[len(res.Files)-1]))
			fmt.Fprintf(w, "wrote %s: %s\n", out, strings.Join(res.Files, ", "))
			return nil
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&out, "out", "godwit-demo", "output directory (created when missing)")
	fl.Float64Var(&seconds, "seconds", 0, "scene time to play (default: the scenario's duration, 60 s for campus-shuttle)")
	fl.Uint64Var(&seed, "seed", 0, "random seed of the scene (default: the scenario's own)")
	fl.Float64Var(&speed, "speed", 0, "time scale: 1 real time, 4 four times faster (default: fit the scene into 25 s)")
	fl.StringVar(&scen, "scenario", demo.DefaultScenario, "shipped scenario name or scenario file to play")
	fl.StringVar(&logLevel, "log-level", "error", "log level: debug, info, warn, error")
	return cmd
}
