package main

import (
	"bufio"
	"fmt"
	"os"
	"time"

	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/transport/mqtt"
	"github.com/spf13/cobra"
)

// runRepublish is `replay --to-broker`: the recording goes back onto a
// broker at the recorded pace, for a live daemon on the bench.
func runRepublish(cmd *cobra.Command, f *replayFlags) error {
	speed := f.speed
	if !cmd.Flags().Changed("speed") {
		speed = 1 // a bench test wants the recorded pace unless told otherwise
	}
	var topics []string
	if f.config != "" {
		cfg, err := loadConfig(cmd, f.config)
		if err != nil {
			return err
		}
		for _, s := range cfg.Sensors {
			topics = append(topics, s.Topic)
		}
	}
	log, err := buildLogger(f.logLevel, cmd.ErrOrStderr())
	if err != nil {
		return err
	}
	defer func() { _ = log.Sync() }()
	in, err := os.Open(f.in)
	if err != nil {
		return usageError{err}
	}
	defer in.Close()
	client, err := mqtt.New(mqtt.Options{URL: f.toBroker, CleanSession: true, QoS: 1, Logger: log,
		ClientID: fmt.Sprintf("godwit-replay-%d-%d", os.Getpid(), time.Now().UnixNano()%1e6)})
	if err != nil {
		return usageError{err}
	}
	client.Start()
	defer client.Close()
	if !client.WaitConnected(10 * time.Second) {
		return fmt.Errorf("cannot connect to %s within 10 s", f.toBroker)
	}
	sum, err := daemon.Republish(cmd.Context(), bufio.NewReaderSize(in, 1<<16), client,
		daemon.RepublishOptions{Speed: speed, Topics: topics, Retime: f.retime, Logger: log})
	if err != nil {
		return err
	}
	fmt.Fprintf(cmd.OutOrStdout(), "sent %d messages to %s (%d on other topics skipped, %d failed, %d malformed lines, t_ns shifted in %d)\n",
		sum.Sent, f.toBroker, sum.Skipped, sum.Failed, sum.MalformedLines, sum.Retimed)
	if sum.Failed > 0 {
		return fmt.Errorf("%d messages could not be published", sum.Failed)
	}
	return nil
}
