package main

import (
	"fmt"
	"net/url"
	"time"

	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/transport/broker"
	"github.com/spf13/cobra"
	"go.uber.org/zap"
)

func init() { commands = append(commands, newRunCmd) }

// embeddedLinger is how long an embedded broker outlives the daemon at stop.
const embeddedLinger = 500 * time.Millisecond

func newRunCmd() *cobra.Command {
	var path, level, cpuProfile string
	var embedded bool
	cmd := &cobra.Command{
		Use:   "run --config FILE [--log-level L] [--embedded-broker]",
		Short: "Run the daemon: subscribe to the sensors, fuse, publish tracks and health",
		Long: `run connects to the MQTT broker of the configuration, subscribes to every
sensor topic and publishes fused tracks on output.tracks_topic (at
output.rate_hz, or after every scan with rate_hz 0) and a retained health
message once a second on output.health_topic. output.status_topic holds
"online" (retained) while godwit is connected and "offline" (the last will)
otherwise. The connection is re-made after a broker restart.

With metrics.listen set (default 127.0.0.1:9464; "" turns it off) an HTTP
endpoint there serves Prometheus metrics on /metrics, /healthz (200 while
the process runs) and /readyz (200 when connected to the broker with every
sensor subscription made, else 503 with the reason). If the address cannot
be bound, godwit logs an error and fuses on without the endpoint.

SIGINT or SIGTERM stops it gracefully: queued messages are processed, the
last output is published, the status is set to "offline", exit code 0.

Logs go to standard error: readable lines on a terminal, JSON otherwise.
--embedded-broker starts a small in-process broker on the address of
broker.url first, for a quick try on a machine without Mosquitto.`,
		Example: `  godwit run --config configs/dock-post.yaml
  godwit run --config configs/dock-post.yaml --embedded-broker --log-level debug`,
		Args: usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			log, err := buildLogger(level, cmd.ErrOrStderr())
			if err != nil {
				return err
			}
			defer func() { _ = log.Sync() }()
			cfg, err := loadConfig(cmd, path)
			if err != nil {
				return err
			}
			if embedded {
				u, err := url.Parse(cfg.Broker.URL)
				if err != nil || (u.Scheme != "tcp" && u.Scheme != "mqtt") || u.Host == "" {
					return usagef("--embedded-broker needs a tcp:// broker.url, not %q", cfg.Broker.URL)
				}
				b, err := broker.Start(broker.Config{Addr: u.Host})
				if err != nil {
					return fmt.Errorf("embedded broker on %s: %w (is another broker listening there?)", u.Host, err)
				}
				defer func() {
					// The daemon's last words (the offline status) are acknowledged
					// by the broker before they reach every subscriber; linger a
					// moment so closing the broker does not cut them off.
					time.Sleep(embeddedLinger)
					b.Close()
				}()
				log.Info("embedded broker listening", zap.String("url", b.URL()))
			}
			d, err := daemon.New(daemon.Options{Config: cfg, Logger: log})
			if err != nil {
				return usageError{err}
			}
			stopProfile, err := startCPUProfile(cpuProfile)
			if err != nil {
				return err
			}
			defer stopProfile()
			if err := d.Run(cmd.Context()); err != nil {
				return err
			}
			st := d.Stats()
			log.Info("stopped", zap.Uint64("messages", st.Pipeline.Messages), zap.Uint64("accepted", st.Pipeline.Accepted),
				zap.Uint64("published", st.Published), zap.Uint64("outages", st.Outages))
			return nil
		},
	}
	cmd.Flags().StringVar(&path, "config", "", "configuration file (YAML)")
	cmd.Flags().StringVar(&level, "log-level", "info", "log level: debug, info, warn, error")
	cmd.Flags().BoolVar(&embedded, "embedded-broker", false, "start an in-process MQTT broker on the address of broker.url")
	cmd.Flags().StringVar(&cpuProfile, "cpuprofile", "", "write a CPU profile of the daemon to this file until it stops (go tool pprof)")
	_ = cmd.MarkFlagRequired("config")
	return cmd
}
