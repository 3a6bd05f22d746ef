// Package demo runs godwit's whole pipeline on one machine and scores it:
// an embedded MQTT broker, the simulated campus-shuttle scene played into
// it live, the real daemon fusing it over MQTT, a consumer collecting the
// published tracks and health, and the evaluation against the scene's
// ground truth with an HTML report. It also holds the scoring helpers that
// `godwit replay --truth` shares (raw-detection baseline, NIS per sensor).
//
// Time. The scene is played faster than real time (Options.Speed), while
// the daemon runs on the wall clock, as it would on a vehicle. Every
// measurement's t_ns is shifted by one constant D, so that the first
// message looks measured when it is sent, and the spacing of the t_ns is
// kept: the filters see the scene's true time steps, so its speeds and
// accelerations stay what the configuration's process noise was tuned for.
// Compressing the t_ns to the wall clock instead would multiply every speed
// by the time scale and every acceleration by its square. The price is that
// the measurement times run ahead of their arrival by up to
// seconds·(1 − 1/speed), so the demo widens limits.time_window_ms by that
// much, and health.clock_jump_ms too: from the receiver's side every sensor
// clock gains on the wall clock, which the clock-offset watchdog would
// otherwise report as a stepping clock. Tracks come back stamped in the shifted time; the scoring subtracts
// D again and compares them with the truth in scene time.
package demo

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"sync"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/examples/scenario"
	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/runtime/eval"
	"github.com/godwit-fusion/godwit/runtime/report"
	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/broker"
	"github.com/godwit-fusion/godwit/transport/mqtt"
	"github.com/valyala/fastjson"
	"go.uber.org/zap"
)

// DefaultScenario is the scene the demo plays.
const DefaultScenario = "campus-shuttle"

// DefaultWall is how long the playback lasts by default: the time scale is
// chosen so that the scene fits (the whole demo then ends within about 30 s).
const DefaultWall = 25 * time.Second

// Options configure one demo run. The zero value plays the whole
// campus-shuttle scene with its own seed into ./godwit-demo.
type Options struct {
	Out      string  // output folder; "" means godwit-demo
	Scenario string  // shipped name or file; "" means DefaultScenario
	Seconds  float64 // scene time to play; 0 means the scenario's duration
	Seed     uint64
	SeedSet  bool    // use Seed instead of the scenario's seed
	Speed    float64 // time scale (2 = twice real time); 0 fits the scene into DefaultWall, never slower than real time
	Logger   *zap.Logger
	// Progress, when set, is called after each published message with the
	// count so far and the total, from the playing goroutine.
	Progress func(done, total int)
	// Eval overrides the metric parameters.
	Eval eval.Options
}

// Result is what a demo run did and how it scored.
type Result struct {
	Scenario string
	Seed     uint64
	Seconds  float64 // scene time played
	Speed    float64
	OffsetNs int64 // D: added to every t_ns on the way out, subtracted from the tracks for scoring
	Wall     time.Duration

	Published     int // messages sent to the broker
	PublishFailed int
	TracksMsgs    int // tracks messages the consumer received
	Health        HealthLog
	Daemon        daemon.Stats

	Scored *Scored
	Files  []string // written into Out, the report page last
}

// Run plays the demo. It returns an error when the pipeline could not be
// set up or produced nothing to score; cancelling ctx cuts the playback
// short and still scores what was received.
func Run(ctx context.Context, opt Options) (*Result, error) {
	started := time.Now()
	log := opt.Logger
	if log == nil {
		log = zap.NewNop()
	}
	if opt.Out == "" {
		opt.Out = "godwit-demo"
	}
	if opt.Scenario == "" {
		opt.Scenario = DefaultScenario
	}
	if opt.Seconds < 0 || math.IsNaN(opt.Seconds) || opt.Speed < 0 || math.IsNaN(opt.Speed) {
		return nil, fmt.Errorf("demo: seconds %g and speed %g must be ≥ 0", opt.Seconds, opt.Speed)
	}
	sc, err := scenario.Open(opt.Scenario)
	if err != nil {
		return nil, err
	}
	if err := os.MkdirAll(opt.Out, 0o755); err != nil {
		return nil, err
	}

	// The scene, written as a recording and a truth file (kept in Out, so
	// the run can be replayed with godwit replay --truth).
	var recBuf, truthBuf bytes.Buffer
	st, err := sc.Write(&recBuf, &truthBuf, scenario.Options{Seed: opt.Seed, SeedSet: opt.SeedSet, Seconds: opt.Seconds})
	if err != nil {
		return nil, err
	}
	res := &Result{Scenario: sc.Name, Seed: st.Seed, Seconds: st.Seconds}
	if err := writeFiles(opt.Out, map[string][]byte{"recording.jsonl": recBuf.Bytes(), "truth.jsonl": truthBuf.Bytes()}); err != nil {
		return nil, err
	}
	recs, _, err := ReadRecords(bytes.NewReader(recBuf.Bytes()))
	if err != nil {
		return nil, err
	}
	truth, err := eval.ReadTruth(bytes.NewReader(truthBuf.Bytes()))
	if err != nil {
		return nil, err
	}
	if len(recs) == 0 || len(truth) == 0 {
		return nil, errors.New("demo: the scene produced no messages")
	}
	res.Speed = opt.Speed
	if res.Speed == 0 {
		res.Speed = max(1, st.Seconds/DefaultWall.Seconds())
	}

	b, err := broker.Start(broker.Config{})
	if err != nil {
		return nil, fmt.Errorf("demo: embedded broker: %w", err)
	}
	defer b.Close()

	cfg := liveConfig(sc.Config, b.URL(), st.Seconds, res.Speed)
	col := &collector{healthTopic: cfg.Output.HealthTopic, statusTopic: cfg.Output.StatusTopic}
	consumer, err := mqtt.New(mqtt.Options{URL: b.URL(), ClientID: "godwit-demo-consumer", CleanSession: true, QoS: 1, Logger: log})
	if err != nil {
		return nil, err
	}
	for _, t := range []string{cfg.Output.TracksTopic, cfg.Output.HealthTopic, cfg.Output.StatusTopic} {
		if err := consumer.Subscribe(t, 1, col); err != nil {
			return nil, err
		}
	}
	consumer.Start()
	defer consumer.Close()
	if !consumer.WaitConnected(10 * time.Second) {
		return nil, fmt.Errorf("demo: cannot connect to the embedded broker at %s", b.URL())
	}

	d, err := daemon.New(daemon.Options{Config: cfg, Logger: log})
	if err != nil {
		return nil, err
	}
	dctx, stopDaemon := context.WithCancel(context.Background())
	defer stopDaemon()
	derr := make(chan error, 1)
	go func() { derr <- d.Run(dctx) }()
	// The daemon subscribes before it announces "online" (transport/mqtt),
	// so once the status reads online nothing sent is missed.
	if err := col.waitStatus(ctx, "online", 10*time.Second, derr); err != nil {
		stopDaemon()
		return nil, err
	}

	sensor, err := mqtt.New(mqtt.Options{URL: b.URL(), ClientID: "godwit-demo-sensors", CleanSession: true, QoS: 1, Logger: log})
	if err != nil {
		return nil, err
	}
	sensor.Start()
	if !sensor.WaitConnected(10 * time.Second) {
		sensor.Close()
		return nil, fmt.Errorf("demo: cannot connect to the embedded broker at %s", b.URL())
	}
	sent := play(ctx, sensor, recs, res, byte(cfg.Broker.QoS), opt.Progress)
	sensor.Close()

	// Let the daemon take in the last messages and publish one more output
	// period, then stop it: its graceful stop processes what is queued and
	// publishes the last tracks and health before "offline".
	wait(ctx, 2*time.Duration(1e9/max(cfg.Output.RateHz, 1))+200*time.Millisecond)
	stopDaemon()
	if err := <-derr; err != nil {
		return nil, fmt.Errorf("demo: daemon: %w", err)
	}
	res.Daemon = d.Stats()
	// "offline" comes after the last tracks and health on the same
	// connection; the broker forwards them in order.
	_ = col.waitStatus(context.Background(), "offline", 5*time.Second, nil)
	consumer.Close()
	_ = b.Close()

	tracksFile, healthFile, lat := col.outputs(sent, &res.Health)
	res.TracksMsgs = len(col.tracks)
	if err := writeFiles(opt.Out, map[string][]byte{"tracks.jsonl": tracksFile, "health.jsonl": healthFile}); err != nil {
		return nil, err
	}
	tracks, err := eval.ReadTracks(bytes.NewReader(tracksFile))
	if err != nil {
		return nil, fmt.Errorf("demo: reading the received tracks: %w", err)
	}
	if len(tracks) == 0 {
		return nil, errors.New("demo: the daemon published no tracks message")
	}
	for i := range tracks {
		tracks[i].TNs -= res.OffsetNs
		for j := range tracks[i].Tracks {
			tracks[i].Tracks[j].UpdatedNs -= res.OffsetNs
		}
	}
	res.Scored, err = Score(sc.Config, truth, tracks, recs, ScoreOptions{Eval: opt.Eval, LatencyMS: lat})
	if err != nil {
		return nil, err
	}
	res.Wall = time.Since(started)

	sumJSON, err := res.summaryJSON()
	if err != nil {
		return nil, err
	}
	if err := writeFiles(opt.Out, map[string][]byte{"summary.json": sumJSON}); err != nil {
		return nil, err
	}
	files, err := res.Scored.WriteReport(opt.Out, fmt.Sprintf("godwit demo: %s, %g s", sc.Name, st.Seconds), res.runFields())
	if err != nil {
		return nil, fmt.Errorf("demo: writing the report: %w", err)
	}
	res.Files = append([]string{"recording.jsonl", "truth.jsonl", "tracks.jsonl", "health.jsonl", "summary.json"}, files...)
	return res, nil
}

// liveConfig is the scenario's configuration pointed at the embedded
// broker, with the plausible-time window and the clock-step watchdog
// widened for the accelerated clock (see the package comment) and no metrics endpoint (a fixed port could be
// taken; the demo reads the daemon's counters directly).
func liveConfig(base *configs.Config, url string, seconds, speed float64) *configs.Config {
	c := *base
	c.Broker.URL = url
	c.Broker.ClientID = "godwit-demo-" + c.Vehicle
	c.Broker.Username, c.Broker.PasswordFile = "", ""
	c.Broker.TLS = configs.TLS{}
	c.Metrics.Listen = ""
	drift := 1000 * seconds * (1 - 1/speed) // ms the t_ns gain on the wall clock over the run
	c.Limits.TimeWindowMS += drift
	// Seen from the receiver, every sensor clock runs speed× fast, which
	// the clock-offset watchdog rightly reports as a stepping clock; the
	// step it may take is widened by the same drift (nothing at speed 1).
	c.Health.ClockJumpMS += drift
	return &c
}

// sentMsg is one message as the demo's "sensors" sent it.
type sentMsg struct {
	wallNs int64
	tNs    int64 // shifted; 0 for a payload without t_ns
}

// play publishes the records at their arrival spacing divided by the speed,
// each measurement's t_ns shifted by D.
func play(ctx context.Context, pub *mqtt.Client, recs []Record, res *Result, qos byte, progress func(int, int)) []sentMsg {
	sent := make([]sentMsg, 0, len(recs))
	var (
		p     fastjson.Parser
		arena fastjson.Arena
		buf   []byte
	)
	start := time.Now()
	rx0 := recs[0].RxNs
	res.OffsetNs = start.UnixNano() - rx0
	for i, r := range recs {
		due := start.Add(time.Duration(float64(r.RxNs-rx0) / res.Speed))
		if wait(ctx, time.Until(due)) != nil {
			break
		}
		payload, tNs := r.Payload, int64(0)
		if b, t, ok := shiftTNs(&p, &arena, buf[:0], r.Payload, res.OffsetNs); ok {
			payload, buf, tNs = b, b, t
		}
		if err := pub.Publish(r.Topic, payload, qos, false); err != nil {
			res.PublishFailed++
			// After a timeout paho may still hold the buffer.
			buf = nil
		} else {
			res.Published++
			sent = append(sent, sentMsg{wallNs: time.Now().UnixNano(), tNs: tNs})
		}
		if progress != nil {
			progress(i+1, len(recs))
		}
	}
	return sent
}

// shiftTNs adds offset to the integer t_ns of a measurement message; other
// payloads (malformed ones included) go out untouched.
func shiftTNs(p *fastjson.Parser, a *fastjson.Arena, dst, payload []byte, offset int64) ([]byte, int64, bool) {
	v, err := p.ParseBytes(payload)
	if err != nil || v.Type() != fastjson.TypeObject {
		return nil, 0, false
	}
	tv := v.Get("t_ns")
	if tv == nil || tv.Type() != fastjson.TypeNumber {
		return nil, 0, false
	}
	t, err := tv.Int64()
	shifted := t + offset
	if err != nil || (offset > 0) != (shifted > t) && offset != 0 {
		return nil, 0, false // not an integer, or the sum overflows
	}
	a.Reset()
	v.Set("t_ns", a.NewNumberString(strconv.FormatInt(shifted, 10)))
	return v.MarshalTo(dst), shifted, true
}

func wait(ctx context.Context, d time.Duration) error {
	if d <= 0 {
		return ctx.Err()
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// collector is the consumer's sink: what the daemon published, with the
// wall time it arrived.
type collector struct {
	mu     sync.Mutex
	tracks []received
	health [][]byte
	status string
	change chan struct{}

	healthTopic, statusTopic string
}

type received struct {
	wallNs  int64
	payload []byte
}

func (c *collector) Push(topic string, payload []byte, _ byte, _ bool, arrivalNs int64) bool {
	cp := append([]byte(nil), payload...)
	c.mu.Lock()
	defer c.mu.Unlock()
	switch topic {
	case c.statusTopic:
		c.status = string(cp)
		if c.change != nil {
			close(c.change)
			c.change = nil
		}
	case c.healthTopic:
		c.health = append(c.health, cp)
	default:
		c.tracks = append(c.tracks, received{wallNs: arrivalNs, payload: cp})
	}
	return true
}

// waitStatus waits until the daemon's status reads want.
func (c *collector) waitStatus(ctx context.Context, want string, timeout time.Duration, derr <-chan error) error {
	deadline := time.NewTimer(timeout)
	defer deadline.Stop()
	for {
		c.mu.Lock()
		if c.status == want {
			c.mu.Unlock()
			return nil
		}
		if c.change == nil {
			c.change = make(chan struct{})
		}
		ch := c.change
		c.mu.Unlock()
		select {
		case <-ch:
		case err := <-derr:
			return fmt.Errorf("demo: the daemon stopped before it was %s: %v", want, err)
		case <-deadline.C:
			return fmt.Errorf("demo: the daemon was not %s within %s", want, timeout)
		case <-ctx.Done():
			return ctx.Err()
		}
	}
}

// outputs are the received tracks and health as JSON Lines, the health
// log, and one latency sample per measurement sent: from its publication to
// the arrival of the first tracks message after it (broker in, queue, wait
// for the output period, engine, broker out).
func (c *collector) outputs(sent []sentMsg, hl *HealthLog) (tracks, health []byte, latMS []float64) {
	c.mu.Lock()
	defer c.mu.Unlock()
	for _, r := range c.tracks {
		tracks = append(append(tracks, r.payload...), '\n')
	}
	for _, h := range c.health {
		health = append(append(health, h...), '\n')
		hl.Add(h)
	}
	j := 0
	for _, s := range sent {
		if s.tNs == 0 {
			continue
		}
		for j < len(c.tracks) && c.tracks[j].wallNs < s.wallNs {
			j++
		}
		if j == len(c.tracks) {
			break
		}
		latMS = append(latMS, float64(c.tracks[j].wallNs-s.wallNs)/1e6)
	}
	return tracks, health, latMS
}

func writeFiles(dir string, files map[string][]byte) error {
	for name, b := range files {
		if err := os.WriteFile(filepath.Join(dir, name), b, 0o644); err != nil {
			return err
		}
	}
	return nil
}

// runFields are the report's "Run" rows.
func (r *Result) runFields() []report.Field {
	ps := r.Daemon.Pipeline
	return []report.Field{
		{Name: "scenario", Value: fmt.Sprintf("%s, seed %d, %g s of scene time", r.Scenario, r.Seed, r.Seconds)},
		{Name: "time scale", Value: fmt.Sprintf("%.3g× real time (t_ns shifted by a constant, spacing kept)", r.Speed)},
		{Name: "wall time", Value: r.Wall.Round(100 * time.Millisecond).String()},
		{Name: "messages published", Value: fmt.Sprintf("%d (%d failed)", r.Published, r.PublishFailed)},
		{Name: "daemon: accepted / rejected", Value: fmt.Sprintf("%d / %d", ps.Accepted, sumRejected(ps.Rejected))},
		{Name: "daemon: late-dropped, queue-dropped", Value: fmt.Sprintf("%d, %d", ps.LateDropped, r.Daemon.QueueDropped)},
		{Name: "tracks messages received", Value: fmt.Sprint(r.TracksMsgs)},
		{Name: "tracks confirmed", Value: fmt.Sprint(ps.Confirmed)},
		{Name: "health messages received", Value: fmt.Sprintf("%d, last state %s", r.Health.Messages, r.Health.LastState)},
		{Name: "alerts raised", Value: joinOr(r.Health.Alerts(), "none")},
		{Name: "latency samples", Value: "wall time from a sensor message's publication to the next tracks message received (broker, queue, output period, engine, broker)"},
		{Name: "daemon's own latency (last health)", Value: fmt.Sprintf("p50 %.3g ms, p99 %.3g ms (arrival to publication)", r.Health.LastP50MS, r.Health.LastP99MS)},
		{Name: "NIS", Value: "the engine is deterministic: the same messages replayed in-process give the daemon's NIS, sampled every 0.5 s"},
	}
}

func sumRejected(r [transport.NumReasons]uint64) uint64 {
	var n uint64
	for _, v := range r {
		n += v
	}
	return n
}

func joinOr(a []string, empty string) string {
	if len(a) == 0 {
		return empty
	}
	s := a[0]
	for _, x := range a[1:] {
		s += ", " + x
	}
	return s
}

// summaryJSON is OUT/summary.json: what the demo did, then the evaluation
// (the same object replay --truth writes under "evaluation").
func (r *Result) summaryJSON() ([]byte, error) {
	ev, err := r.Scored.Summary.JSON()
	if err != nil {
		return nil, err
	}
	ps := r.Daemon.Pipeline
	out := struct {
		Demo struct {
			Scenario        string            `json:"scenario"`
			Seed            uint64            `json:"seed"`
			Seconds         float64           `json:"seconds"`
			Speed           float64           `json:"speed"`
			OffsetNs        int64             `json:"t_ns_offset"`
			WallSeconds     float64           `json:"wall_seconds"`
			Published       int               `json:"published"`
			PublishFailed   int               `json:"publish_failed"`
			Accepted        uint64            `json:"accepted"`
			Rejected        map[string]uint64 `json:"rejected"`
			LateDropped     uint64            `json:"late_dropped"`
			QueueDropped    uint64            `json:"queue_dropped"`
			TracksMessages  int               `json:"tracks_messages"`
			HealthMessages  int               `json:"health_messages"`
			TracksConfirmed uint64            `json:"tracks_confirmed"`
			Alerts          []string          `json:"alerts_raised"`
		} `json:"demo"`
		Evaluation json.RawMessage `json:"evaluation"`
	}{Evaluation: ev}
	d := &out.Demo
	d.Scenario, d.Seed, d.Seconds, d.Speed, d.OffsetNs = r.Scenario, r.Seed, r.Seconds, r.Speed, r.OffsetNs
	d.WallSeconds = math.Round(r.Wall.Seconds()*10) / 10
	d.Published, d.PublishFailed = r.Published, r.PublishFailed
	d.Accepted, d.LateDropped, d.QueueDropped = ps.Accepted, ps.LateDropped, r.Daemon.QueueDropped
	d.Rejected = map[string]uint64{}
	for i, n := range ps.Rejected {
		if n > 0 {
			d.Rejected[transport.Reason(i).String()] = n
		}
	}
	d.TracksMessages, d.HealthMessages, d.TracksConfirmed = r.TracksMsgs, r.Health.Messages, ps.Confirmed
	d.Alerts = append([]string{}, r.Health.Alerts()...)
	js, err := json.MarshalIndent(out, "", "  ")
	return append(js, '\n'), err
}
