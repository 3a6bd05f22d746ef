package main

import (
	"context"
	"fmt"
	"os"
	"time"

	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/mqtt"
	"github.com/spf13/cobra"
	"go.uber.org/zap"
)

func init() { commands = append(commands, newRecordCmd) }

// Bounds of the recorder's hand-over queue: generous, because a recording
// should lose nothing, but bounded, because a flood must not exhaust memory.
const (
	recordQueueLen      = 8192
	recordMaxPayload    = 4 << 20
	recordQueueSlotSize = 2048
)

func newRecordCmd() *cobra.Command {
	var (
		brokerURL, out, note, level, username, passwordFile, ca string
		topics                                                  []string
		seconds                                                 float64
		qos                                                     int
	)
	cmd := &cobra.Command{
		Use:   "record --broker URL --topic FILTER... --out FILE [--seconds N]",
		Short: "Record MQTT traffic as it arrives into a recording (JSON Lines)",
		Long: `record subscribes to the given topic filters (MQTT wildcards + and # allowed)
and writes every received message, with its arrival time, to a recording that
replay reads. The file is flushed at least once a second, so a recording cut
short loses little. It stops after --seconds, or on SIGINT/SIGTERM, flushes,
and prints how many messages it recorded.`,
		Example: `  godwit record --broker tcp://127.0.0.1:1883 --topic 'dock-post-2/sensors/#' --out gate.jsonl --seconds 60
  godwit record --broker tcp://127.0.0.1:1883 --topic 'dock-post-2/sensors/+' --topic 'godwit/dock-post-2/tracks' --out bench.jsonl`,
		Args: usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			if len(topics) == 0 {
				return usagef("at least one --topic is required")
			}
			if seconds < 0 {
				return usagef("--seconds is %g; it must be ≥ 0 (0: until interrupted)", seconds)
			}
			if qos < 0 || qos > 2 {
				return usagef("--qos %d: want 0, 1 or 2", qos)
			}
			log, err := buildLogger(level, cmd.ErrOrStderr())
			if err != nil {
				return err
			}
			defer func() { _ = log.Sync() }()
			ctx := cmd.Context()
			if seconds > 0 {
				var cancel context.CancelFunc
				ctx, cancel = context.WithTimeout(ctx, time.Duration(seconds*float64(time.Second)))
				defer cancel()
			}
			client, err := mqtt.New(mqtt.Options{
				URL: brokerURL, ClientID: fmt.Sprintf("godwit-record-%d-%d", os.Getpid(), time.Now().UnixNano()%1e6),
				CleanSession: true, QoS: byte(qos), Username: username, PasswordFile: passwordFile, CAFile: ca,
				Logger: log,
			})
			if err != nil {
				return usageError{err}
			}
			// The writer flushes at least once a second (its default), so a
			// recording cut short loses little.
			rw, err := transport.CreateRecording(out, transport.RecordOptions{Note: note})
			if err != nil {
				client.Close()
				return err
			}
			n, dropped, err := record(ctx, client, rw, topics, byte(qos), log)
			if err != nil {
				return err
			}
			fmt.Fprintf(cmd.OutOrStdout(), "recorded %d messages to %s\n", n, out)
			if dropped > 0 {
				return fmt.Errorf("%d messages were dropped because the disk could not keep up", dropped)
			}
			return nil
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&brokerURL, "broker", "", "broker URL: tcp://, ssl://, ws:// or wss://")
	fl.StringArrayVar(&topics, "topic", nil, "topic filter to record (repeat for more)")
	fl.StringVar(&out, "out", "", "recording file to write (JSON Lines; replaced if it exists)")
	fl.Float64Var(&seconds, "seconds", 0, "stop after this many seconds (0: until interrupted)")
	fl.IntVar(&qos, "qos", 1, "subscription QoS")
	fl.StringVar(&note, "note", "", "free text for the recording header")
	fl.StringVar(&username, "username", "", "broker user name (password from --password-file or $"+mqtt.PasswordEnv+")")
	fl.StringVar(&passwordFile, "password-file", "", "file holding the broker password")
	fl.StringVar(&ca, "ca", "", "CA certificate file (PEM) for ssl:// and wss://; default the system roots")
	fl.StringVar(&level, "log-level", "warn", "log level: debug, info, warn, error")
	_ = cmd.MarkFlagRequired("broker")
	_ = cmd.MarkFlagRequired("out")
	return cmd
}

// record copies messages from the subscriptions to the recording until ctx
// ends. The MQTT callback only fills a bounded queue; this goroutine does
// the writing, so a slow disk never stalls the connection.
func record(ctx context.Context, client *mqtt.Client, rw *transport.RecordWriter, topics []string, qos byte, log *zap.Logger) (uint64, uint64, error) {
	q := transport.NewQueue(recordQueueLen, recordQueueSlotSize, recordMaxPayload)
	for _, f := range topics {
		if err := client.Subscribe(f, qos, q); err != nil {
			client.Close()
			_ = rw.Close()
			return 0, 0, usageError{err}
		}
	}
	client.Start()
	var in transport.Inbound
	var werr error
	var oversize uint64
	drain := func() {
		for q.Pop(&in) {
			if in.Size > len(in.Payload) {
				oversize++ // cut by the queue: a partial payload would lie
				continue
			}
			if werr == nil {
				werr = rw.Write(in.ArrivalNs, in.Topic, in.QoS, in.Retained, in.Payload)
			}
		}
	}
	for done := false; !done; {
		select {
		case <-ctx.Done():
			done = true
		case <-q.Ready():
			drain()
		}
	}
	// Unsubscribe by disconnecting, then keep what is already queued.
	client.Close()
	drain()
	if err := rw.Close(); werr == nil {
		werr = err
	}
	if werr != nil {
		return rw.Count(), q.Dropped(), fmt.Errorf("writing the recording: %w", werr)
	}
	if oversize > 0 {
		log.Warn("messages over the size limit were not recorded", zap.Uint64("count", oversize),
			zap.Int("limit_bytes", recordMaxPayload))
	}
	if client.Stats().Connects == 0 {
		return rw.Count(), q.Dropped(), fmt.Errorf("never connected to the broker")
	}
	return rw.Count(), q.Dropped(), nil
}
