package main

import (
	"fmt"
	"strings"
	"time"

	"github.com/godwit-fusion/godwit/runtime/fleet"
	"github.com/spf13/cobra"
	"go.uber.org/zap"
)

func init() { commands = append(commands, newFleetCmd) }

func newFleetCmd() *cobra.Command {
	var (
		o          fleet.Options
		level      string
		silent     time.Duration
		history    int
		maxVehicle int
	)
	cmd := &cobra.Command{
		Use:   "fleet --broker URL [--listen 127.0.0.1:8080] [--share GROUP] [--topic-root godwit]",
		Short: "Watch every vehicle's health: web page, JSON API and Prometheus metrics",
		Long: `fleet subscribes to ROOT/+/health and ROOT/+/status (ROOT is --topic-root,
default godwit, which matches godwit's default output topics), keeps each
vehicle's latest health message and an alert history, and serves them:

  /                 the fleet page, updated live (Server-Sent Events)
  /events           the event stream itself
  /api/vehicles     every vehicle's state, alerts, sensors, last seen (JSON)
  /api/alerts       the alert history, oldest first (?vehicle= ?since= ?limit=)
  /metrics          Prometheus metrics (godwit_fleet_*)
  /healthz /readyz  alive; connected to the broker

A vehicle is "silent" when no health message has come for --silent-after
(it needs no last will to be noticed) and "offline" when its status topic
says so. Bad messages are counted and ignored.

--share GROUP subscribes as member of an MQTT shared subscription
($share/GROUP/...): several monitors in one group split the messages on a
clustered broker. Each then sees only part of every vehicle's messages, so
set --silent-after to several health periods per member; a broker does not
send retained messages to shared subscriptions, so a new member learns a
vehicle only from its next message.

The page has no login: keep --listen on loopback or behind a proxy that
authenticates. SIGINT or SIGTERM stops it gracefully (exit 0).`,
		Example: `  godwit fleet --broker tcp://127.0.0.1:1883
  godwit fleet --broker tcp://broker.yard.internal:1883 --listen 0.0.0.0:8080 --silent-after 10s
  godwit fleet --broker tcp://broker.yard.internal:1883 --share fleet-watch --listen 127.0.0.1:8081`,
		Args: usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			if silent <= 0 {
				return usagef("--silent-after is %v; it must be > 0", silent)
			}
			if history <= 0 {
				return usagef("--history is %d; it must be > 0", history)
			}
			if maxVehicle <= 0 {
				return usagef("--max-vehicles is %d; it must be > 0", maxVehicle)
			}
			root := strings.Trim(o.Store.TopicRoot, "/")
			if root == "" || strings.ContainsAny(root, "+#") {
				return usagef("--topic-root %q: want a topic prefix without wildcards, e.g. godwit", o.Store.TopicRoot)
			}
			if strings.ContainsAny(o.Share, "/+#") {
				return usagef("--share %q: a group name is one topic level, without '/', '+' or '#'", o.Share)
			}
			log, err := buildLogger(level, cmd.ErrOrStderr())
			if err != nil {
				return err
			}
			defer func() { _ = log.Sync() }()
			o.Store.TopicRoot, o.Store.SilentAfter, o.Store.History, o.Store.MaxVehicles = root, silent, history, maxVehicle
			o.Logger = log
			m, err := fleet.New(o)
			if err != nil {
				return usageError{err}
			}
			fmt.Fprintf(cmd.OutOrStdout(), "fleet page at %s (subscribing to %s)\n", m.URL(),
				strings.Join(m.Store().Filters(o.Share), ", "))
			if err := m.Run(cmd.Context()); err != nil {
				return err
			}
			c := m.Store().Counters()
			var rejected uint64
			for _, n := range c.Rejected {
				rejected += n
			}
			log.Info("stopped", zap.Uint64("health", c.Health), zap.Uint64("status", c.Status),
				zap.Uint64("rejected", rejected))
			return nil
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&o.BrokerURL, "broker", "", "broker URL: tcp://, ssl://, ws:// or wss://")
	fl.StringVar(&o.Listen, "listen", fleet.DefaultListen, "HTTP address of the page, API and metrics")
	fl.StringVar(&o.Share, "share", "", "MQTT shared subscription group (several monitors split the fleet)")
	fl.StringVar(&o.Store.TopicRoot, "topic-root", fleet.DefaultTopicRoot, "first topic level(s) before <vehicle>/health and <vehicle>/status")
	fl.DurationVar(&silent, "silent-after", fleet.DefaultSilentAfter, "a vehicle with no health message for this long is silent")
	fl.IntVar(&history, "history", fleet.DefaultHistory, "alert events kept (oldest dropped first)")
	fl.IntVar(&maxVehicle, "max-vehicles", fleet.DefaultMaxVehicles, "vehicles tracked at most; more are refused and counted")
	fl.StringVar(&o.ClientID, "client-id", "", "MQTT client id (default: unique per process)")
	fl.StringVar(&o.Username, "username", "", "broker user name (password from --password-file or $GODWIT_MQTT_PASSWORD)")
	fl.StringVar(&o.PasswordFile, "password-file", "", "file holding the broker password")
	fl.StringVar(&o.CAFile, "ca", "", "CA certificate file (PEM) for ssl:// and wss://; default the system roots")
	fl.StringVar(&o.CertFile, "cert", "", "client certificate (PEM), with --key")
	fl.StringVar(&o.KeyFile, "key", "", "client key (PEM), with --cert")
	fl.StringVar(&level, "log-level", "info", "log level: debug, info, warn, error")
	_ = cmd.MarkFlagRequired("broker")
	return cmd
}
