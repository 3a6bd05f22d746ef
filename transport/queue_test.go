package transport

import (
	"strconv"
	"sync"
	"testing"

	"pgregory.net/rapid"
)

func TestQueueDropsOldest(t *testing.T) {
	q := NewQueue(4, 8, 64)
	for i := range 10 {
		fresh := q.Push("t", []byte(strconv.Itoa(i)), 1, false, int64(i))
		if fresh != (i < 4) {
			t.Errorf("push %d: fresh %v", i, fresh)
		}
	}
	if q.Dropped() != 6 || q.Pushed() != 10 || q.Len() != 4 {
		t.Errorf("dropped %d pushed %d len %d", q.Dropped(), q.Pushed(), q.Len())
	}
	var in Inbound
	for want := 6; want < 10; want++ { // the newest four survive, oldest first
		if !q.Pop(&in) || string(in.Payload) != strconv.Itoa(want) || in.ArrivalNs != int64(want) {
			t.Fatalf("pop: %q %d, want %d", in.Payload, in.ArrivalNs, want)
		}
	}
	if q.Pop(&in) {
		t.Error("pop from an empty queue")
	}
}

func TestQueueCutsOversizedPayloads(t *testing.T) {
	q := NewQueue(2, 8, 16)
	big := make([]byte, 1000)
	q.Push("t", big, 0, false, 1)
	var in Inbound
	q.Pop(&in)
	// Kept one byte over the limit so the decoder still says too_large.
	if len(in.Payload) != 17 || in.Size != 1000 {
		t.Errorf("kept %d bytes, size %d", len(in.Payload), in.Size)
	}
	d, _ := NewDecoder(testSensors, Limits{MaxPayloadBytes: 16})
	var m Measurement
	if r, _ := ReasonOf(d.Decode(in.Payload, 1, &m)); r != ReasonTooLarge {
		t.Errorf("reason %v", r)
	}
}

// TestQueueModel checks the queue against a plain slice model under random
// push/pop sequences (property test): FIFO order of the newest Cap messages,
// and every message either popped, still queued or counted as dropped.
func TestQueueModel(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		capacity := rapid.IntRange(1, 8).Draw(t, "cap")
		q := NewQueue(capacity, 4, 32)
		var model []string
		dropped := 0
		var in Inbound
		ops := rapid.SliceOfN(rapid.IntRange(0, 2), 1, 100).Draw(t, "ops")
		for i, op := range ops {
			if op < 2 { // push twice as often as pop
				p := strconv.Itoa(i) + rapid.StringN(0, 40, -1).Draw(t, "pad")
				q.Push("t", []byte(p), 0, false, int64(i))
				model = append(model, string([]byte(p)[:min(len(p), 33)]))
				if len(model) > capacity {
					model = model[1:]
					dropped++
				}
				continue
			}
			ok := q.Pop(&in)
			if ok != (len(model) > 0) {
				t.Fatalf("pop ok %v with %d modelled", ok, len(model))
			}
			if ok {
				if string(in.Payload) != model[0] {
					t.Fatalf("popped %q, want %q", in.Payload, model[0])
				}
				model = model[1:]
			}
		}
		if q.Len() != len(model) || int(q.Dropped()) != dropped {
			t.Fatalf("len %d dropped %d, model %d %d", q.Len(), q.Dropped(), len(model), dropped)
		}
	})
}

func TestQueueConcurrent(t *testing.T) {
	q := NewQueue(64, 16, 64)
	const n = 20000
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		for i := range n {
			q.Push("t", []byte(strconv.Itoa(i)), 0, false, int64(i))
		}
	}()
	var in Inbound
	got, last := 0, int64(-1)
	for got+int(q.Dropped()) < n {
		if !q.Pop(&in) {
			<-q.Ready()
			continue
		}
		if in.ArrivalNs <= last || string(in.Payload) != strconv.FormatInt(in.ArrivalNs, 10) {
			t.Fatalf("out of order or torn: %d after %d, payload %q", in.ArrivalNs, last, in.Payload)
		}
		last = in.ArrivalNs
		got++
	}
	wg.Wait()
	for q.Pop(&in) {
		got++
	}
	if got+int(q.Dropped()) != n {
		t.Errorf("popped %d + dropped %d != %d", got, q.Dropped(), n)
	}
}

func TestQueueNoAllocs(t *testing.T) {
	q := NewQueue(8, 512, DefaultMaxPayloadBytes)
	p := []byte(radarJSON)
	var in Inbound
	q.Push("t", p, 1, false, 1)
	q.Pop(&in)
	if a := testing.AllocsPerRun(200, func() {
		q.Push("t", p, 1, false, 1)
		q.Pop(&in)
	}); a != 0 {
		t.Errorf("push+pop allocates %.1f", a)
	}
}

func BenchmarkQueuePushPop(b *testing.B) {
	q := NewQueue(1024, 512, DefaultMaxPayloadBytes)
	p := []byte(radarJSON)
	var in Inbound
	b.ReportAllocs()
	for b.Loop() {
		q.Push("shuttle-07/sensors/front_radar", p, 1, false, 1)
		q.Pop(&in)
	}
}

// BenchmarkIngest is the path from the MQTT callback to engine input:
// queue push, pop, decode.
func BenchmarkIngest(b *testing.B) {
	q := NewQueue(1024, 512, DefaultMaxPayloadBytes)
	d := newTestDecoder(b)
	p := []byte(radarJSON)
	var in Inbound
	var m Measurement
	b.ReportAllocs()
	for b.Loop() {
		q.Push("shuttle-07/sensors/front_radar", p, 1, false, tArrival)
		q.Pop(&in)
		if err := d.Decode(in.Payload, in.ArrivalNs, &m); err != nil {
			b.Fatal(err)
		}
	}
}
