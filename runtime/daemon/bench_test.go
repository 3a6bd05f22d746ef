package daemon

import (
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
)

// loopedScene is 20 s of the gatesim gate pass, decoded once. Message i of
// a benchmark is scene message i mod n, shifted by whole scene lengths so
// time keeps running forward; the tractors start over every 20 s, so tracks
// are born, confirmed and deleted all along, as at a real gate.
type loopedScene struct {
	topics []string
	meas   []transport.Measurement
	span   int64
	buf    []byte
}

func newLoopedScene(b *testing.B) (*loopedScene, *Pipeline) {
	cfg := dockPost(b)
	p, err := NewPipeline(cfg, engine.Options{}, nil)
	if err != nil {
		b.Fatal(err)
	}
	msgs := gatesim.Gate(cfg, 20*time.Second, 1)
	dec, err := transport.NewDecoder(p.sensorSpecs(), transport.Limits{PastWindow: -1, FutureWindow: -1})
	if err != nil {
		b.Fatal(err)
	}
	ls := &loopedScene{span: int64(20 * time.Second), buf: make([]byte, 0, 1024)}
	for _, m := range msgs {
		var dst transport.Measurement
		if err := dec.Decode(m.Payload, 0, &dst); err != nil {
			b.Fatal(err)
		}
		dst.Dets = append([]transport.Detection(nil), dst.Dets...)
		ls.meas = append(ls.meas, dst)
		ls.topics = append(ls.topics, m.Topic)
	}
	return ls, p
}

// next encodes message i as a sensor driver would (allocation-free into a
// reused buffer) and returns its topic, payload and arrival time.
func (ls *loopedScene) next(i int) (string, []byte, int64) {
	k := i % len(ls.meas)
	m := ls.meas[k]
	lap := int64(i / len(ls.meas))
	m.TNs += lap * ls.span
	m.Seq += uint64(lap) * 1000
	ls.buf, _ = transport.AppendMeasurement(ls.buf[:0], &m)
	return ls.topics[k], ls.buf, m.TNs + 5_000_000
}

// The daemon's ingest path, from the MQTT callback to the engine input:
// Queue.Push (the callback), Queue.Pop and Pipeline.Handle (decode and
// engine.Ingest) on the engine goroutine. The sensor driver's encoding is
// in the loop too; it allocates nothing into its reused buffer.
func BenchmarkIngestPath(b *testing.B) {
	ls, p := newLoopedScene(b)
	q := transport.NewQueue(1024, 1024, 65536)
	var in transport.Inbound
	for i := 0; i < 3*len(ls.meas); i++ { // warm: buffers, tracks, lag-window log
		topic, payload, rx := ls.next(i)
		q.Push(topic, payload, 1, false, rx)
		q.Pop(&in)
		_ = p.Handle(in.Topic, in.Payload, in.ArrivalNs)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		topic, payload, rx := ls.next(3*len(ls.meas) + i)
		q.Push(topic, payload, 1, false, rx)
		q.Pop(&in)
		if err := p.Handle(in.Topic, in.Payload, in.ArrivalNs); err != nil && p.Stats().LateDropped == 0 {
			b.Fatal(err)
		}
	}
}

// Our side only: Push, Pop and Decode, without the engine.
func BenchmarkIngestPathToDecoder(b *testing.B) {
	ls, p := newLoopedScene(b)
	q := transport.NewQueue(1024, 1024, 65536)
	var in transport.Inbound
	var m transport.Measurement
	for i := 0; i < len(ls.meas); i++ {
		topic, payload, rx := ls.next(i)
		q.Push(topic, payload, 1, false, rx)
		q.Pop(&in)
		_ = p.dec.Decode(in.Payload, in.ArrivalNs, &m)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		topic, payload, rx := ls.next(len(ls.meas) + i)
		q.Push(topic, payload, 1, false, rx)
		q.Pop(&in)
		if !p.listens(in.Topic) {
			b.Fatal("topic")
		}
		if err := p.dec.Decode(in.Payload, in.ArrivalNs, &m); err != nil {
			b.Fatal(err)
		}
	}
}

// The output path at output.rate_hz: Advance (tracks predicted to the
// stamp) and encoding into the reused buffer, one message per 100 ms of
// scene time with the scans in between.
func BenchmarkTracksOutput(b *testing.B) {
	ls, p := newLoopedScene(b)
	i := 0
	step := func() []byte {
		// Three scans (one 100 ms period of radar and lidar), then output.
		var out []byte
		for k := 0; k < 3; k++ {
			topic, payload, rx := ls.next(i)
			i++
			_ = p.Handle(topic, payload, rx)
			if b, ok := p.Advance(rx); ok {
				out = b
			}
		}
		return out
	}
	for k := 0; k < 2*len(ls.meas); k++ {
		step()
	}
	b.ReportAllocs()
	b.ResetTimer()
	for k := 0; k < b.N; k++ {
		step()
	}
}

// The daemon's own drain step (what its engine goroutine runs when the
// queue signals), fed through the queue the MQTT callback pushes into.
func BenchmarkDaemonDrain(b *testing.B) {
	ls, _ := newLoopedScene(b)
	d, err := New(Options{Config: dockPost(b)})
	if err != nil {
		b.Fatal(err)
	}
	for i := 0; i < 3*len(ls.meas); i++ {
		topic, payload, rx := ls.next(i)
		d.queue.Push(topic, payload, 1, false, rx)
		d.drain(1)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		topic, payload, rx := ls.next(3*len(ls.meas) + i)
		d.queue.Push(topic, payload, 1, false, rx)
		d.drain(1)
		d.snapshot()
	}
}

// The metrics' share of a message on the ingest path: counting one
// accepted message and its step time, and (once per engine-loop step) the
// per-sensor gap counters.
func BenchmarkMetricsPerMessage(b *testing.B) {
	d, err := New(Options{Config: dockPost(b)})
	if err != nil {
		b.Fatal(err)
	}
	h := handled{sensor: 1, outcome: outcomeAccepted}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		t0 := time.Now()
		d.metrics.handled(h, time.Since(t0))
		d.metrics.sensorCounters(d.pipe.Engine())
	}
}
