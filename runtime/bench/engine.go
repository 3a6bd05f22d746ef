package bench

import (
	"fmt"
	"math"
	"runtime"
	"time"

	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
)

// warmFraction of a workload's messages run before measuring: tracks are
// born and confirmed, buffers reach their working size.
const warmFraction = 0.1

// EngineRow measures engine throughput on a generated scene: Ingest then
// Advance (rate_hz 0: one tracks message per scan) for every message, with
// decoded measurements, so only the fusion core is timed.
func EngineRow(targets int, clutter, seconds float64) (Row, error) {
	msgs, err := Generate(Scene{Targets: targets, Clutter: clutter, Seconds: seconds, Seed: uint64(targets)})
	if err != nil {
		return Row{}, err
	}
	cfg, err := Config(ConfigParams{})
	if err != nil {
		return Row{}, err
	}
	e, err := engine.New(cfg, engine.Options{})
	if err != nil {
		return Row{}, err
	}
	var out transport.TracksMsg
	warm := int(float64(len(msgs)) * warmFraction)
	for i := 0; i < warm; i++ {
		if err := e.Ingest(&msgs[i].Meas, msgs[i].RxNs); err != nil {
			return Row{}, fmt.Errorf("bench: engine refused message %d: %w", i, err)
		}
		e.Advance(msgs[i].RxNs, &out)
	}
	dets := Detections(msgs[warm:])
	var m0, m1 runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&m0)
	t0 := time.Now()
	for i := warm; i < len(msgs); i++ {
		if err := e.Ingest(&msgs[i].Meas, msgs[i].RxNs); err != nil {
			return Row{}, fmt.Errorf("bench: engine refused message %d: %w", i, err)
		}
		e.Advance(msgs[i].RxNs, &out)
	}
	el := time.Since(t0)
	runtime.ReadMemStats(&m1)
	c := e.Counters()
	r := Row{Section: "engine", Name: fmt.Sprintf("%d targets, clutter %g/scan, %d scans", targets, clutter, len(msgs)-warm)}
	r.add("dets/s", float64(dets)/el.Seconds(), "")
	r.add("scans/s", float64(len(msgs)-warm)/el.Seconds(), "")
	r.add("allocs/det", float64(m1.Mallocs-m0.Mallocs)/float64(dets), "")
	r.add("tracks", float64(len(out.Tracks)), "")
	r.Note = fmt.Sprintf("births %d, filter errors %d", c.Births, c.FilterErrors)
	return r, nil
}

// PipelineResult is what PipelineRun measured.
type PipelineResult struct {
	Messages, Detections int // in the measured part
	Elapsed              time.Duration
	Mallocs              uint64
	GCCycles             uint32
	TracksOut            uint64
	HeapInuse            uint64 // at the end
}

// PipelineRun replays recorded bytes through daemon.Pipeline (decode,
// ingest, advance, encode) the way the daemon does with rate_hz 0, and
// measures the steady state after warm-up: wall time, heap allocations
// (runtime.MemStats.Mallocs) and GC cycles (runtime.MemStats.NumGC) before
// and after. The messages must come from Generate (the bench post).
func PipelineRun(msgs []Message) (PipelineResult, error) {
	cfg, err := Config(ConfigParams{})
	if err != nil {
		return PipelineResult{}, err
	}
	p, err := daemon.NewPipeline(cfg, engine.Options{}, nil)
	if err != nil {
		return PipelineResult{}, err
	}
	var sink int
	handle := func(m *Message) error {
		if err := p.Handle(m.Topic, m.Payload, m.RxNs); err != nil {
			return err
		}
		if b, ok := p.Advance(m.RxNs); ok {
			sink += len(b)
		}
		return nil
	}
	warm := int(float64(len(msgs)) * warmFraction)
	for i := 0; i < warm; i++ {
		if err := handle(&msgs[i]); err != nil {
			return PipelineResult{}, fmt.Errorf("bench: pipeline refused message %d: %w", i, err)
		}
	}
	var m0, m1 runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&m0)
	t0 := time.Now()
	for i := warm; i < len(msgs); i++ {
		if err := handle(&msgs[i]); err != nil {
			return PipelineResult{}, fmt.Errorf("bench: pipeline refused message %d: %w", i, err)
		}
	}
	el := time.Since(t0)
	runtime.ReadMemStats(&m1)
	return PipelineResult{Messages: len(msgs) - warm, Detections: Detections(msgs[warm:]), Elapsed: el,
		Mallocs: m1.Mallocs - m0.Mallocs, GCCycles: m1.NumGC - m0.NumGC,
		TracksOut: p.Stats().TracksOut, HeapInuse: m1.HeapInuse}, nil
}

// PipelineRow generates enough of a 200-target scene for about dets
// detections after warm-up and measures PipelineRun on it.
func PipelineRow(dets int) (Row, error) {
	const targets, clutter = 200, 10.0
	// Per second of scene: 10 lidar + 20 radar scans, each about
	// 0.9·targets + clutter detections.
	perSec := 10*(0.95*targets+clutter) + 20*(0.9*targets+clutter)
	secs := math.Ceil(float64(dets)/(1-warmFraction)/perSec) + 1
	msgs, err := Generate(Scene{Targets: targets, Clutter: clutter, Seconds: secs, Seed: 7})
	if err != nil {
		return Row{}, err
	}
	res, err := PipelineRun(msgs)
	if err != nil {
		return Row{}, err
	}
	r := Row{Section: "pipeline", Name: fmt.Sprintf("decode+engine+encode, %d targets, %d dets", targets, res.Detections)}
	r.add("dets/s", float64(res.Detections)/res.Elapsed.Seconds(), "")
	r.add("msgs/s", float64(res.Messages)/res.Elapsed.Seconds(), "")
	r.add("allocs/det", float64(res.Mallocs)/float64(res.Detections), "")
	r.add("GC cycles", float64(res.GCCycles), "")
	r.Note = fmt.Sprintf("after %.0f %% warm-up; %d allocations in all", warmFraction*100, res.Mallocs)
	return r, nil
}
