package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/spf13/cobra"
)

func init() { commands = append(commands, newReplayCmd) }

type replayFlags struct {
	config, in, out, toBroker, logLevel string
	speed                               float64
	retime                              bool
}

func newReplayCmd() *cobra.Command {
	var f replayFlags
	cmd := &cobra.Command{
		Use:   "replay --config FILE --in REC.jsonl [--out DIR] [--speed X] [--to-broker URL]",
		Short: "Run a recording through the fusion engine, deterministically, without a broker",
		Long: `replay feeds a recording through the same engine the daemon runs, in-process
and without a broker. The recorded arrival times (rx_ns) are the only clock the
engine sees, so the same recording always gives byte-identical output:

  OUT/tracks.jsonl   one tracks message a line, exactly as it would be published
  OUT/health.jsonl   one health message per second of recorded time
  OUT/summary.json   messages, rejected by reason, late-dropped, tracks, ...

At the end of input everything buffered is processed and one final tracks
message is written, stamped at the latest measurement time.

By default it runs as fast as possible; --speed 1 paces by the recorded arrival
times (2 = twice as fast). With --to-broker it runs no engine and instead
re-publishes the recording to a broker at the recorded pace, so a live
"godwit run" can be bench-tested; --retime (on by default) then shifts every
measurement's t_ns by one constant so the recording looks live.`,
		Example: `  godwit replay --config configs/dock-post.yaml --in gate.jsonl --out /tmp/gate
  godwit replay --config configs/dock-post.yaml --in gate.jsonl --speed 1
  godwit replay --in gate.jsonl --to-broker tcp://127.0.0.1:1883`,
		Args: usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			if f.in == "" {
				return usagef("--in is required")
			}
			if f.speed < 0 {
				return usagef("--speed is %g; it must be ≥ 0 (0: as fast as possible)", f.speed)
			}
			if f.toBroker != "" {
				return runRepublish(cmd, &f)
			}
			return runReplay(cmd, &f)
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&f.config, "config", "", "configuration file (YAML); optional with --to-broker, where it limits the re-published topics to its sensors")
	fl.StringVar(&f.in, "in", "", "recording to replay (JSON Lines)")
	fl.StringVar(&f.out, "out", "replay-out", "output directory (created when missing)")
	fl.Float64Var(&f.speed, "speed", 0, "pace by recorded arrival times: 1 real time, 2 twice as fast; 0 as fast as possible (default 1 with --to-broker)")
	fl.StringVar(&f.toBroker, "to-broker", "", "re-publish the recording to this broker URL instead of running the engine")
	fl.BoolVar(&f.retime, "retime", true, "with --to-broker: shift t_ns so the recorded measurements look current")
	fl.StringVar(&f.logLevel, "log-level", "warn", "log level: debug, info, warn, error")
	return cmd
}

func runReplay(cmd *cobra.Command, f *replayFlags) error {
	if f.config == "" {
		return usagef("--config is required (unless --to-broker)")
	}
	cfg, err := loadConfig(cmd, f.config)
	if err != nil {
		return err
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
	if err := os.MkdirAll(f.out, 0o755); err != nil {
		return err
	}
	tracks, err := newOutFile(filepath.Join(f.out, "tracks.jsonl"))
	if err != nil {
		return err
	}
	defer tracks.close()
	health, err := newOutFile(filepath.Join(f.out, "health.jsonl"))
	if err != nil {
		return err
	}
	defer health.close()

	sum, err := daemon.Replay(cmd.Context(), cfg, bufio.NewReaderSize(in, 1<<16),
		daemon.ReplayOutput{Tracks: tracks.w, Health: health.w},
		daemon.ReplayOptions{Speed: f.speed, Logger: log})
	if err != nil {
		return err
	}
	if err := errors.Join(tracks.close(), health.close()); err != nil {
		return err
	}
	js, err := json.MarshalIndent(sum, "", "  ")
	if err != nil {
		return err
	}
	if err := os.WriteFile(filepath.Join(f.out, "summary.json"), append(js, '\n'), 0o644); err != nil {
		return err
	}
	fmt.Fprintf(cmd.OutOrStdout(), "%s\nwrote %s\n", sum, f.out)
	if sum.Accepted == 0 {
		fmt.Fprintf(cmd.ErrOrStderr(), "godwit: warning: no measurement of %s was accepted; is %s the configuration it was recorded with?\n",
			f.in, f.config)
	}
	return nil
}

// outFile is a buffered output file closed once.
type outFile struct {
	f      *os.File
	w      *bufio.Writer
	closed bool
}

func newOutFile(path string) (*outFile, error) {
	f, err := os.Create(path)
	if err != nil {
		return nil, err
	}
	return &outFile{f: f, w: bufio.NewWriterSize(f, 1<<16)}, nil
}

func (o *outFile) close() error {
	if o.closed {
		return nil
	}
	o.closed = true
	return errors.Join(o.w.Flush(), o.f.Close())
}
