package main

import (
	"fmt"
	"os"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"github.com/godwit-fusion/godwit/runtime/bench"
	"github.com/godwit-fusion/godwit/transport/broker"
)

func init() { commands = append(commands, newBenchCmd) }

func newBenchCmd() *cobra.Command {
	var (
		brokerURL, only     string
		asJSON              bool
		filterTime, latency time.Duration
		trial               time.Duration
		engineSeconds, rate float64
		detections, flood   int
		qos                 int
		cpuProfile          string
		inProcess           bool
	)
	cmd := &cobra.Command{
		Use:   "bench [--broker URL] [--json]",
		Short: "Measure filters, engine, replay pipeline and MQTT paths on this machine",
		Long: `bench runs godwit's standard workloads on the machine at hand and prints one
table. Every row is measured in this run, one after the other:

  filter    one predict + update of one track: SR-KF, SR-UKF and the particle
            filter (500 particles) against a plain covariance-form filter
            written with gonum mat; ns/op, allocations/op and the ratio
  engine    fusion core throughput (detections/s) on a fixed sensor post with
            a lidar and a radar, 50 and 1000 targets with clutter
  pipeline  decode + engine + encode from recorded bytes, as the daemon runs
            it with output.rate_hz 0: detections/s, allocations per
            detection and GC cycles after warm-up
  mqtt      the broker round trip of a plain paho publisher and subscriber
            (the limit) against publisher → godwit → subscriber: latency
            p50/p99 at a fixed rate, from the publish time stamped in the
            sensor message (t_ns) to the receipt of the first tracks message
            that reflects it; the sustained rate, the highest paced rate
            each path takes in full (a search of short paced trials); and
            the rate each path moves under a flood
  process   this binary started as "godwit run": time from exec to the first
            tracks message, and resident memory with 500 live tracks

The MQTT rows use an embedded broker unless --broker names a real one; the
godwit path runs this binary as "godwit run" in its own process, as on a
vehicle (--in-process keeps it in the bench's). The machine should be
otherwise quiet: other load shows up in every figure.`,
		Example: `  godwit bench
  godwit bench --broker tcp://127.0.0.1:1883 --json > bench.json
  godwit bench --only filter,engine --filter-time 200ms`,
		Args: usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			o := bench.Options{FilterTime: filterTime, EngineSeconds: engineSeconds, Detections: detections,
				MQTT: bench.MQTTOptions{BrokerURL: brokerURL, Rate: rate, Latency: latency, Flood: flood, QoS: byte(qos), Trial: trial}}
			if qos < 0 || qos > 1 {
				return usagef("--qos is %d, want 0 or 1", qos)
			}
			if filterTime < 0 || trial < 0 || latency < 0 || engineSeconds < 0 || rate < 0 || detections < 0 || flood < 0 {
				return usagef("durations, rates and counts must not be negative")
			}
			if trial == 0 {
				o.MQTT.Trial = -1 // bench.MQTTOptions' zero means the default
			}
			if only != "" {
				for _, s := range strings.Split(only, ",") {
					s = strings.TrimSpace(s)
					if !contains(bench.Sections, s) {
						return usagef("--only %q: sections are %s", s, strings.Join(bench.Sections, ", "))
					}
					o.Sections = append(o.Sections, s)
				}
			}
			if exe, err := os.Executable(); err == nil {
				o.Executable = exe
				if !inProcess {
					o.MQTT.Executable = exe
				}
			}
			if brokerURL == "" {
				o.StartBroker = func() (string, func(), error) {
					b, err := broker.Start(broker.Config{})
					if err != nil {
						return "", nil, fmt.Errorf("embedded broker: %w", err)
					}
					return b.URL(), func() { _ = b.Close() }, nil
				}
			}
			if !asJSON {
				o.Progress = cmd.ErrOrStderr()
			}
			stopProfile, err := startCPUProfile(cpuProfile)
			if err != nil {
				return err
			}
			defer stopProfile()
			if cpuProfile != "" && o.MQTT.Executable != "" {
				o.MQTT.ChildProfile = cpuProfile + ".godwit"
			}
			rep := bench.Run(cmd.Context(), o)
			if asJSON {
				err = rep.WriteJSON(cmd.OutOrStdout())
			} else {
				err = rep.WriteTable(cmd.OutOrStdout())
			}
			if err != nil {
				return err
			}
			if len(rep.Errors) > 0 {
				return fmt.Errorf("bench: %d section(s) failed", len(rep.Errors))
			}
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&brokerURL, "broker", "", "MQTT broker URL for the mqtt rows (default: an embedded broker)")
	f.BoolVar(&asJSON, "json", false, "print the report as JSON")
	f.StringVar(&only, "only", "", "comma-separated sections to run: "+strings.Join(bench.Sections, ","))
	f.DurationVar(&filterTime, "filter-time", time.Second, "measuring time per filter and per baseline")
	f.Float64Var(&engineSeconds, "engine-seconds", 10, "scene length of the engine rows, seconds")
	f.IntVar(&detections, "detections", 1_000_000, "detections replayed through decode+engine+encode after warm-up")
	f.Float64Var(&rate, "rate", 2000, "messages/s of the MQTT latency phase")
	f.DurationVar(&latency, "latency-time", 3*time.Second, "length of the MQTT latency phase")
	f.IntVar(&flood, "flood", 50000, "messages of the MQTT flood phase")
	f.DurationVar(&trial, "trial-time", time.Second, "length of each paced run of the MQTT sustained-rate search (0 skips the search)")
	f.IntVar(&qos, "qos", 0, "MQTT QoS of both paths (0 or 1)")
	f.BoolVar(&inProcess, "in-process", false, "run the godwit path's daemon inside the bench's process instead of as \"godwit run\"")
	f.StringVar(&cpuProfile, "cpuprofile", "", "write a CPU profile of the bench to this file, and of the godwit path's child process to FILE.godwit (go tool pprof)")
	return cmd
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}
