package scenario

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/filters/geo"
	"github.com/godwit-fusion/godwit/transport"
)

// ErrTooLong reports a run longer than a scenario may last.
var ErrTooLong = errors.New("scenario: run too long")

// Options change one run of a scenario.
type Options struct {
	Seed    uint64
	SeedSet bool    // use Seed instead of the scenario's seed
	Seconds float64 // > 0: simulate this long instead of duration_s
}

// Message is one simulated arrival, as a recording stores it.
type Message struct {
	RxNs      int64 // arrival, receiver clock
	TrueNs    int64 // when it was measured, true time (t_ns minus the clock offset)
	Topic     string
	Sensor    int // index in the configuration
	Payload   []byte
	Malformed bool
	order     int // generation order within the sensor, to break ties
}

// Object is one target in a truth line.
type Object struct {
	ID       string
	Pos, Vel Vec
}

// TruthLine is one line of truth.jsonl.
type TruthLine struct {
	TNs     int64
	Objects []Object
	Ego     PlatformState
}

// Stats count what a run produced.
type Stats struct {
	Seed       uint64
	Seconds    float64
	Messages   int // lines of the recording after the header
	Scans      int // valid measurement messages delivered
	Lost       int // messages lost in transit or in a dropout (seq gaps)
	Malformed  int
	OutOfOrder int // arrivals whose t_ns is older than an earlier arrival's of the same sensor
	Targets    int // target detections delivered
	Clutter    int // clutter detections delivered
	TruthLines int
}

// Output is a whole run in memory: the arrivals sorted by arrival time, and
// the truth.
type Output struct {
	Messages []Message
	Truth    []TruthLine
	Stats    Stats
}

// Simulate runs the scenario. It is a pure function of the scenario and the
// options: the same seed gives the same output, byte for byte.
func (sc *Scenario) Simulate(opt Options) (*Output, error) {
	seed := sc.Seed
	if opt.SeedSet {
		seed = opt.Seed
	}
	dur := sc.Duration
	if opt.Seconds > 0 {
		dur = opt.Seconds
	}
	if dur > maxDurationS {
		return nil, fmt.Errorf("%w: %g s is longer than the %d s a scenario may last", ErrTooLong, dur, maxDurationS)
	}
	out := &Output{Stats: Stats{Seed: seed, Seconds: dur}}
	var site *geo.Local
	if hasGNSS(sc) {
		l, err := geo.NewLocal(sc.Config.Site.Lat, sc.Config.Site.Lon, sc.Config.Site.Alt)
		if err != nil {
			return nil, fmt.Errorf("scenario: site origin of config %s: %w", sc.ConfigRef, err)
		}
		site = &l
	}
	classes := sc.classes()
	startNs := sc.Start.UnixNano()
	durNs := int64(math.Round(dur * 1e9))
	for i := range sc.Sensors {
		s := &sc.Sensors[i]
		if s.Off {
			continue
		}
		g := &sensorSim{sc: sc, s: s, site: site, classes: classes, startNs: startNs, durNs: durNs,
			r: rand.New(rand.NewPCG(seed, streamID("sensor:"+s.Cfg.Name)))}
		if err := g.run(out); err != nil {
			return nil, err
		}
	}
	sort.SliceStable(out.Messages, func(i, j int) bool {
		a, b := &out.Messages[i], &out.Messages[j]
		if a.RxNs != b.RxNs {
			return a.RxNs < b.RxNs
		}
		if a.Sensor != b.Sensor {
			return a.Sensor < b.Sensor
		}
		return a.order < b.order
	})
	latest := make([]int64, len(sc.Sensors))
	for i := range latest {
		latest[i] = math.MinInt64
	}
	for _, m := range out.Messages {
		if m.Malformed {
			continue
		}
		if m.TrueNs < latest[m.Sensor] {
			out.Stats.OutOfOrder++
		}
		latest[m.Sensor] = max(latest[m.Sensor], m.TrueNs)
	}
	out.Stats.Messages = len(out.Messages)
	stepNs := int64(math.Round(sc.Step * 1e9))
	for tn := int64(0); tn < durNs; tn += stepNs {
		t := float64(tn) / 1e9
		tl := TruthLine{TNs: startNs + tn, Ego: sc.Ego.At(t)}
		for k := range sc.Targets {
			if p, v, ok := sc.Targets[k].At(t); ok {
				tl.Objects = append(tl.Objects, Object{ID: sc.Targets[k].ID, Pos: p, Vel: v})
			}
		}
		out.Truth = append(out.Truth, tl)
	}
	out.Stats.TruthLines = len(out.Truth)
	return out, nil
}

func hasGNSS(sc *Scenario) bool {
	return slices.ContainsFunc(sc.Sensors, func(s Sensor) bool { return s.Cfg.Kind == configs.KindGNSS && !s.Off })
}

// classes lists the target classes of the scene, sorted, for a camera's
// false detections.
func (sc *Scenario) classes() []string {
	var out []string
	for _, t := range sc.Targets {
		if t.Class != "" && !slices.Contains(out, t.Class) {
			out = append(out, t.Class)
		}
	}
	sort.Strings(out)
	return out
}

// Note is the recording header's note for a run.
func (sc *Scenario) Note(st Stats) string {
	return fmt.Sprintf("simulated by godwit: scenario %s, config %s, seed %d, %g s", sc.Name, sc.ConfigRef, st.Seed, st.Seconds)
}

// Write runs the scenario and writes the recording (DESIGN.md "Recording
// file") and the truth (JSON Lines) to the two writers.
func (sc *Scenario) Write(recording, truth io.Writer, opt Options) (Stats, error) {
	out, err := sc.Simulate(opt)
	if err != nil {
		return Stats{}, err
	}
	return out.Stats, sc.writeOutput(out, recording, truth)
}

func (sc *Scenario) writeOutput(out *Output, recording, truth io.Writer) error {
	rw, err := transport.NewRecordWriter(recording, transport.RecordOptions{
		Note: sc.Note(out.Stats), Created: sc.Start, FlushEvery: -1,
	})
	if err != nil {
		return err
	}
	qos := byte(min(max(sc.Config.Broker.QoS, 0), 2))
	for i := range out.Messages {
		m := &out.Messages[i]
		if err := rw.Write(m.RxNs, m.Topic, qos, false, m.Payload); err != nil {
			rw.Close()
			return err
		}
	}
	if err := rw.Close(); err != nil {
		return err
	}
	bw := bufio.NewWriterSize(truth, 64<<10)
	var line []byte
	for i := range out.Truth {
		line = AppendTruth(line[:0], &out.Truth[i])
		line = append(line, '\n')
		if _, err := bw.Write(line); err != nil {
			return err
		}
	}
	return bw.Flush()
}

// WriteDir runs the scenario and writes DIR/recording.jsonl and
// DIR/truth.jsonl, creating DIR. Nothing is created when the run fails, and
// the files appear whole: each is written under a temporary name first.
func (sc *Scenario) WriteDir(dir string, opt Options) (Stats, error) {
	out, err := sc.Simulate(opt)
	if err != nil {
		return Stats{}, err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return Stats{}, err
	}
	recPath, truthPath := filepath.Join(dir, "recording.jsonl"), filepath.Join(dir, "truth.jsonl")
	rf, err := os.Create(recPath + ".part")
	if err != nil {
		return Stats{}, err
	}
	defer os.Remove(rf.Name())
	defer rf.Close()
	tf, err := os.Create(truthPath + ".part")
	if err != nil {
		return Stats{}, err
	}
	defer os.Remove(tf.Name())
	defer tf.Close()
	if err := sc.writeOutput(out, rf, tf); err != nil {
		return Stats{}, err
	}
	for _, f := range []*os.File{rf, tf} {
		if err := f.Close(); err != nil {
			return Stats{}, err
		}
	}
	if err := os.Rename(rf.Name(), recPath); err != nil {
		return Stats{}, err
	}
	if err := os.Rename(tf.Name(), truthPath); err != nil {
		return Stats{}, err
	}
	return out.Stats, nil
}

// AppendTruth appends one truth line (DESIGN.md: {"t_ns":...,"objects":
// [{"id","pos","vel"}],"ego":{"pos","yaw"}}) without the newline. Values are
// rounded to 1 µm (and 1 µrad), well below any sensor's noise.
func AppendTruth(dst []byte, tl *TruthLine) []byte {
	dst = append(dst, `{"t_ns":`...)
	dst = strconv.AppendInt(dst, tl.TNs, 10)
	dst = append(dst, `,"objects":[`...)
	for i, o := range tl.Objects {
		if i > 0 {
			dst = append(dst, ',')
		}
		dst = append(dst, `{"id":`...)
		dst = strconv.AppendQuote(dst, o.ID)
		dst = append(dst, `,"pos":`...)
		dst = appendPair(dst, o.Pos)
		dst = append(dst, `,"vel":`...)
		dst = appendPair(dst, o.Vel)
		dst = append(dst, '}')
	}
	dst = append(dst, `],"ego":{"pos":`...)
	dst = appendPair(dst, tl.Ego.Pos)
	dst = append(dst, `,"yaw":`...)
	dst = appendMicro(dst, tl.Ego.Yaw)
	return append(dst, "}}"...)
}

func appendPair(dst []byte, v Vec) []byte {
	dst = append(dst, '[')
	dst = appendMicro(dst, v.X)
	dst = append(dst, ',')
	dst = appendMicro(dst, v.Y)
	return append(dst, ']')
}

func appendMicro(dst []byte, v float64) []byte {
	// + 0 turns a rounded −0 into 0.
	return strconv.AppendFloat(dst, math.Round(v*1e6)/1e6+0, 'f', -1, 64)
}
