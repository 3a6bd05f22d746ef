package main

import (
	"errors"
	"fmt"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/examples/scenario"
)

func init() { commands = append(commands, newSimulateCmd) }

func newSimulateCmd() *cobra.Command {
	var (
		name, out string
		seed      uint64
		seconds   float64
	)
	cmd := &cobra.Command{
		Use:   "simulate --scenario NAME|FILE --out DIR",
		Short: "Simulate a scenario: write a recording and its ground truth",
		Long: `simulate plays an invented scenario through the sensors of its paired
configuration and writes DIR/recording.jsonl (what godwit would have received,
in arrival order: detection probability, Poisson clutter, range and field of
view, noise, latency with jitter, clock offset, dropouts, malformed messages)
and DIR/truth.jsonl (where every object and the platform really were).

The output depends only on the scenario and the seed: the same --seed gives
byte-identical files. Shipped scenarios: ` + strings.Join(scenario.Names(), ", ") + `.
The scenario format is described in examples/scenarios/README.md.`,
		Example: `  godwit simulate --scenario campus-shuttle --out /tmp/shuttle
  godwit simulate --scenario crossing --out /tmp/crossing --seed 42 --seconds 12
  godwit simulate --scenario ./my-yard.yaml --out /tmp/yard
  godwit replay --config configs/campus-shuttle.yaml --in /tmp/shuttle/recording.jsonl --truth /tmp/shuttle/truth.jsonl --out /tmp/shuttle/replay`,
		Args: usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			if name == "" {
				return usagef("simulate needs --scenario NAME|FILE (shipped: %s)", strings.Join(scenario.Names(), ", "))
			}
			if out == "" {
				return usagef("simulate needs --out DIR")
			}
			if seconds < 0 {
				return usagef("--seconds is %g, must be positive", seconds)
			}
			sc, err := scenario.Open(name)
			if err != nil {
				return usageError{err}
			}
			opt := scenario.Options{Seed: seed, SeedSet: cmd.Flags().Changed("seed"), Seconds: seconds}
			// The simulator reports no progress of its own: a spinner with
			// the elapsed time shows it is working.
			stop := newProgress(cmd.ErrOrStderr(), "simulating "+sc.Name).spin()
			st, err := sc.WriteDir(out, opt)
			stop()
			if err != nil {
				if errors.Is(err, scenario.ErrTooLong) {
					return usageError{err}
				}
				return fmt.Errorf("simulate %s: %w", sc.Name, err)
			}
			w := cmd.OutOrStdout()
			fmt.Fprintf(w, "scenario %s, seed %d, %g s simulated\n", sc.Name, st.Seed, st.Seconds)
			fmt.Fprintf(w, "  %s: %d messages (%d scans, %d target and %d clutter detections, %d malformed; %d lost, %d out of order)\n",
				filepath.Join(out, "recording.jsonl"), st.Messages, st.Scans, st.Targets, st.Clutter, st.Malformed, st.Lost, st.OutOfOrder)
			fmt.Fprintf(w, "  %s: %d lines\n", filepath.Join(out, "truth.jsonl"), st.TruthLines)
			fmt.Fprintf(w, "replay it with the config %s:\n  godwit replay --config %s --in %s --truth %s --out %s\n",
				sc.ConfigRef, configPathHint(sc), filepath.Join(out, "recording.jsonl"), filepath.Join(out, "truth.jsonl"), filepath.Join(out, "replay"))
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&name, "scenario", "", "shipped scenario name or path to a scenario file")
	f.StringVar(&out, "out", "", "directory for recording.jsonl and truth.jsonl (created if missing)")
	f.Uint64Var(&seed, "seed", 0, "random seed (default: the scenario's seed)")
	f.Float64Var(&seconds, "seconds", 0, "simulate this many seconds instead of the scenario's duration_s")
	return cmd
}

// configPathHint is where the paired config lives, for the replay hint.
func configPathHint(sc *scenario.Scenario) string {
	for _, n := range configs.Examples() {
		if n == strings.TrimSuffix(sc.ConfigRef, ".yaml") && !strings.ContainsAny(sc.ConfigRef, `/\`) {
			return filepath.Join("configs", n+".yaml")
		}
	}
	if filepath.IsAbs(sc.ConfigRef) {
		return sc.ConfigRef
	}
	return filepath.Join(filepath.Dir(sc.File), sc.ConfigRef)
}
