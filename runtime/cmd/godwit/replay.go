package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/runtime/demo"
	"github.com/godwit-fusion/godwit/runtime/eval"
	"github.com/godwit-fusion/godwit/runtime/report"
	"github.com/spf13/cobra"
)

func init() { commands = append(commands, newReplayCmd) }

type replayFlags struct {
	config, in, truth, out, toBroker, logLevel string
	speed                                      float64
	retime                                     bool
}

func newReplayCmd() *cobra.Command {
	var f replayFlags
	cmd := &cobra.Command{
		Use:   "replay --config FILE --in REC.jsonl [--truth T.jsonl] [--out DIR] [--speed X] [--to-broker URL]",
		Short: "Run a recording through the fusion engine, deterministically, without a broker",
		Long: `replay feeds a recording through the same engine the daemon runs, in-process
and without a broker. The recorded arrival times (rx_ns) are the only clock the
engine sees, so the same recording always gives byte-identical output:

  OUT/tracks.jsonl   one tracks message a line, exactly as it would be published
  OUT/health.jsonl   one health message per second of recorded time
  OUT/summary.json   messages, rejected by reason, late-dropped, tracks, ...

At the end of input everything buffered is processed and one final tracks
message is written, stamped at the latest measurement time.

With --truth the run is scored against the ground truth (GOSPA and its
localisation / missed / false parts, OSPA, position RMSE and NEES of matched
tracks, id switches, time to confirm; the raw detections as a baseline; NIS
per sensor; the wait from arrival to the next tracks message). The scores go
into summary.json under "evaluation", and OUT/report.html shows them with
its plots (PNG files beside it).

By default it runs as fast as possible; --speed 1 paces by the recorded arrival
times (2 = twice as fast). With --to-broker it runs no engine and instead
re-publishes the recording to a broker at the recorded pace, so a live
"godwit run" can be bench-tested; --retime (on by default) then shifts every
measurement's t_ns by one constant so the recording looks live.`,
		Example: `  godwit replay --config configs/dock-post.yaml --in gate.jsonl --out /tmp/gate
  godwit replay --config configs/dock-post.yaml --in gate.jsonl --speed 1
  godwit replay --config configs/campus-shuttle.yaml --in examples/sample/recording.jsonl --truth examples/sample/truth.jsonl --out /tmp/sample
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
	fl.StringVar(&f.truth, "truth", "", "ground truth (JSON Lines) to score the run against; writes OUT/report.html")
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
	var truth []eval.TruthLine
	if f.truth != "" {
		// Read the truth first: a bad truth file is bad usage, found before
		// the replay runs.
		if truth, err = readTruth(f.truth); err != nil {
			return usageError{fmt.Errorf("--truth: %w", err)}
		}
	}
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

	var src io.Reader = in
	if bar := newBytesProgress(cmd.ErrOrStderr(), "replay"); bar != nil {
		if st, err := in.Stat(); err == nil && st.Mode().IsRegular() {
			src = &progressReader{r: in, p: bar, size: st.Size()}
			defer bar.done()
		}
	}
	sum, err := daemon.Replay(cmd.Context(), cfg, bufio.NewReaderSize(src, 1<<16),
		daemon.ReplayOutput{Tracks: tracks.w, Health: health.w},
		daemon.ReplayOptions{Speed: f.speed, Logger: log})
	if err != nil {
		return err
	}
	if err := errors.Join(tracks.close(), health.close()); err != nil {
		return err
	}
	if pr, ok := src.(*progressReader); ok {
		pr.p.done()
	}
	var scored *demo.Scored
	if truth != nil {
		stop := newProgress(cmd.ErrOrStderr(), "scoring").spin()
		scored, err = scoreReplay(cfg, truth, f)
		stop()
		if err != nil {
			return err
		}
	}
	if err := writeSummary(filepath.Join(f.out, "summary.json"), sum, scored); err != nil {
		return err
	}
	w := cmd.OutOrStdout()
	fmt.Fprintf(w, "%s\n", sum)
	if scored != nil {
		var hl demo.HealthLog
		if err := readHealth(filepath.Join(f.out, "health.jsonl"), &hl); err != nil {
			return err
		}
		fmt.Fprintf(w, "scored against %s:\n", f.truth)
		scored.PrintTable(w, demo.Figures{TracksConfirmed: sum.TracksConfirmed, Alerts: hl.Alerts()})
		run := []report.Field{{Name: "recording", Value: filepath.Base(f.in)}, {Name: "truth", Value: filepath.Base(f.truth)},
			{Name: "vehicle", Value: cfg.Vehicle},
			{Name: "messages replayed", Value: fmt.Sprint(sum.Messages)}, {Name: "accepted", Value: fmt.Sprint(sum.Accepted)},
			{Name: "rejected", Value: countsText(sum.Rejected)}, {Name: "late-dropped", Value: fmt.Sprint(sum.LateDropped)},
			{Name: "tracks confirmed", Value: fmt.Sprint(sum.TracksConfirmed)},
			{Name: "alerts raised", Value: alertsText(hl.Alerts())},
			{Name: "latency samples", Value: "recorded time from a message's arrival to the first tracks message that includes it (the output period's wait; processing time is not in a recording)"}}
		files, err := scored.WriteReport(f.out, "godwit replay: "+filepath.Base(f.in), run)
		if err != nil {
			return fmt.Errorf("writing the report: %w", err)
		}
		fmt.Fprintf(w, "report: %s\n", filepath.Join(f.out, files[len(files)-1]))
	}
	fmt.Fprintf(w, "wrote %s\n", f.out)
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

// replaySummary is summary.json: the replay's counters, and with --truth
// the evaluation beside them.
type replaySummary struct {
	*daemon.Summary
	Evaluation json.RawMessage `json:"evaluation,omitempty"`
}

func writeSummary(path string, sum *daemon.Summary, scored *demo.Scored) error {
	out := replaySummary{Summary: sum}
	if scored != nil {
		js, err := scored.Summary.JSON()
		if err != nil {
			return err
		}
		out.Evaluation = js
	}
	js, err := json.MarshalIndent(out, "", "  ")
	if err != nil {
		return err
	}
	return os.WriteFile(path, append(js, '\n'), 0o644)
}

// scoreReplay scores the tracks the replay wrote against the truth.
func scoreReplay(cfg *configs.Config, truth []eval.TruthLine, f *replayFlags) (*demo.Scored, error) {
	tf, err := os.Open(filepath.Join(f.out, "tracks.jsonl"))
	if err != nil {
		return nil, err
	}
	defer tf.Close()
	tracks, err := eval.ReadTracks(bufio.NewReaderSize(tf, 1<<16))
	if err != nil {
		return nil, fmt.Errorf("reading back %s: %w", tf.Name(), err)
	}
	in, err := os.Open(f.in)
	if err != nil {
		return nil, err
	}
	defer in.Close()
	recs, _, err := demo.ReadRecords(bufio.NewReaderSize(in, 1<<16))
	if err != nil {
		return nil, err
	}
	return demo.Score(cfg, truth, tracks, recs, demo.ScoreOptions{RecordedLatency: true})
}

func readTruth(path string) ([]eval.TruthLine, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	truth, err := eval.ReadTruth(bufio.NewReaderSize(f, 1<<16))
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	if len(truth) == 0 {
		return nil, fmt.Errorf("%s: no truth lines", path)
	}
	return truth, nil
}

func readHealth(path string, hl *demo.HealthLog) error {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	_, err = hl.ReadFrom(f)
	return err
}

func countsText(m map[string]uint64) string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	if len(keys) == 0 {
		return "none"
	}
	sort.Strings(keys)
	for i, k := range keys {
		keys[i] = fmt.Sprintf("%s %d", k, m[k])
	}
	return strings.Join(keys, ", ")
}

func alertsText(a []string) string {
	if len(a) == 0 {
		return "none"
	}
	return strings.Join(a, ", ")
}
