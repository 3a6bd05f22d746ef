package resilience

import (
	"os"
	"runtime"
	"runtime/pprof"
	"testing"
	"time"

	"go.uber.org/goleak"

	"github.com/godwit-fusion/godwit/runtime/bench"
	"github.com/godwit-fusion/godwit/runtime/testlock"
)

// A flood far above the nominal rate for 10 s (the test checks the rate
// reached at least 10× nominal): the daemon's memory stays bounded, the oldest messages are
// dropped and counted, health reports the overrun (degraded, failed once
// the queue is full), and within 5 s of catching up health is ok again
// and output is fresh.
func TestFloodDropsOldestAndRecovers(t *testing.T) {
	// Floods both cores for 10 s: not beside another package's live test.
	testlock.Exclusive(t)
	leaks := goleak.IgnoreCurrent()
	// The broker runs in a child process: its buffers for slow clients
	// are not godwit's memory.
	url := childBroker(t)
	const queueLen = 64
	// Nominal: the feeder alternates the two sensors every 20 ms, so each
	// has a 40 ms period (25 Hz) and the nominal rate is 50 messages/s.
	const nominal = 50.0
	// QoS 1 for godwit's output, so the broker cannot drop the health
	// messages this test reads; the flood itself is QoS 0.
	cfg, err := bench.Config(bench.ConfigParams{BrokerURL: url, QoS: 1, LidarMS: 40, RadarMS: 40, QueueLen: queueLen})
	if err != nil {
		t.Fatal(err)
	}
	r := startDaemon(t, cfg, nil)
	k := newConsumer(t, url)
	f := startFeeder(t, url, 0, 40, 20*time.Millisecond)
	if !waitFor(10*time.Second, func() bool { return k.nT.Load() > 50 }) {
		t.Fatalf("no steady output before the flood: %d tracks messages", k.nT.Load())
	}
	var ms runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&ms)
	heap0 := ms.HeapAlloc

	// Flood: no pause between messages.
	st0 := r.d.Stats()
	sent0 := f.sent.Load()
	floodStart := time.Now()
	f.period.Store(0)
	// Live heap (after a forced collection) every 250 ms: the peak of
	// the first and of the second half.
	const floodFor = 10 * time.Second
	var peak [2]uint64
	for time.Since(floodStart) < floodFor {
		time.Sleep(250 * time.Millisecond)
		half := 0
		if time.Since(floodStart) > floodFor/2 {
			half = 1
		}
		runtime.GC()
		runtime.ReadMemStats(&ms)
		peak[half] = max(peak[half], ms.HeapAlloc)
	}
	if p := os.Getenv("GODWIT_FLOOD_HEAP"); p != "" {
		if fh, err := os.Create(p); err == nil {
			pprof.WriteHeapProfile(fh)
			fh.Close()
		}
	}
	f.hold.Store(true)
	floodEnd := time.Now()
	f.period.Store(int64(20 * time.Millisecond))
	rate := float64(f.sent.Load()-sent0) / floodEnd.Sub(floodStart).Seconds()
	if rate < 10*nominal {
		t.Fatalf("the flood reached %.0f messages/s, less than 10× the nominal %.0f", rate, nominal)
	}
	t.Logf("flood %.0f messages/s (%.0f× nominal); live heap before %.1f MB, peak %.1f MB then %.1f MB",
		rate, rate/nominal, float64(heap0)/1e6, float64(peak[0])/1e6, float64(peak[1])/1e6)

	// Bounded: the daemon's queue holds queueLen payloads of at most
	// max_payload_bytes (256 KiB), 16 MiB. 32 MB of growth allows for that
	// and the clients' own buffers, and is far below what queuing 10 s of
	// flood without bound would take (over 100 000 messages of 1.7 kB);
	// the second half must not keep growing beyond the first (8 MB slack:
	// queue slots grow once to the largest payload seen, GC timing).
	if peak[1] > heap0+32<<20 {
		t.Errorf("live heap grew from %.1f MB to %.1f MB during the flood", float64(heap0)/1e6, float64(peak[1])/1e6)
	}
	if peak[1] > peak[0]+peak[0]/4+8<<20 {
		t.Errorf("heap kept growing: peak %.1f MB in the first 5 s, %.1f MB in the next", float64(peak[0])/1e6, float64(peak[1])/1e6)
	}
	st1 := r.d.Stats()
	dropped := st1.QueueDropped - st0.QueueDropped
	if dropped == 0 {
		t.Fatalf("nothing was dropped: the flood did not overflow the %d-message queue", queueLen)
	}
	// Oldest first: once the daemon has caught up, the newest message
	// sent is the newest one processed (its t_ns stamps the last tracks
	// message); dropping the newest would lose it. The broker may drop
	// QoS 0 messages for a slow subscriber of its own accord (then the
	// daemon's queue saw fewer than were sent); only then is the newest
	// allowed to be missing, and the last processed must still be recent.
	waitIdle(r)
	st2 := r.d.Stats()
	sentN, pushedN := uint64(f.sent.Load()-sent0), st2.QueuePushed-st0.QueuePushed
	got, want := st2.Pipeline.LastTNs, f.lastTNs.Load()
	switch {
	case pushedN >= sentN && got != want:
		t.Errorf("newest tracks message stamped %d, the newest message sent %d: not the oldest dropped", got, want)
	case got != want && want-got > int64(500*time.Millisecond):
		t.Errorf("the broker dropped %d messages and the last one processed is %.3f s older than the last sent",
			sentN-pushedN, float64(want-got)*1e-9)
	case got != want:
		t.Logf("the broker dropped %d of %d QoS 0 messages itself; the newest processed is %.3f s older than the newest sent",
			sentN-pushedN, sentN, float64(want-got)*1e-9)
	}
	f.hold.Store(false)
	// The recovery clock starts when the daemon has caught up and the
	// sensors speak again: the backlog the broker itself queued for the
	// daemon (large under the race detector) is the broker's, not godwit's.
	resumed := time.Now()
	if !waitFor(5*time.Second, func() bool {
		for _, h := range k.healthSince(floodStart.UnixNano()) {
			if hasCode(h, "overrun") && h.state != "ok" {
				return true
			}
		}
		return false
	}) {
		hs := k.healthSince(floodStart.UnixNano())
		for _, h := range hs {
			t.Logf("health at +%.2f s: %s %v", float64(h.rxNs-floodStart.UnixNano())*1e-9, h.state, h.codes)
		}
		t.Fatalf("health never reported overrun with a state other than ok (%d health messages since the flood began)", len(hs))
	}
	// Recovery: within 5 s of the end, health ok and tracks fresh again
	// (received within 100 ms of the scan they carry).
	var okAt time.Time
	waitFor(5*time.Second, func() bool {
		hs := k.healthSince(resumed.UnixNano())
		if len(hs) > 0 && hs[len(hs)-1].state == "ok" {
			okAt = time.Now()
			return true
		}
		return false
	})
	if okAt.IsZero() {
		hs := k.healthSince(resumed.UnixNano())
		last := seen{}
		if len(hs) > 0 {
			last = hs[len(hs)-1]
		}
		t.Fatalf("health not ok within 5 s of the sensors resuming after the flood: state %q, alerts %v", last.state, last.codes)
	}
	t.Logf("health ok %.2f s after the sensors resumed (%.2f s after the flood); %d dropped by the queue",
		okAt.Sub(resumed).Seconds(), okAt.Sub(floodEnd).Seconds(), dropped)
	tr, _ := k.snapshot()
	fresh := false
	for _, s := range tr {
		if s.rxNs > resumed.UnixNano() && s.rxNs < resumed.Add(5*time.Second).UnixNano() && s.rxNs-s.tNs < int64(100*time.Millisecond) {
			fresh = true
		}
		if s.bad {
			t.Fatalf("a tracks message carried a non-finite or absurd value")
		}
	}
	if !fresh {
		t.Error("no fresh tracks message within 5 s of the sensors resuming")
	}
	f.close()
	k.c.Close()
	r.close(t)
	goleak.VerifyNone(t, leaks)
}

// waitIdle waits until the daemon has processed nothing new for 200 ms.
func waitIdle(r *running) {
	prev, since := r.d.Stats().Pipeline.Messages, time.Now()
	for time.Since(since) < 200*time.Millisecond {
		time.Sleep(10 * time.Millisecond)
		if m := r.d.Stats().Pipeline.Messages; m != prev {
			prev, since = m, time.Now()
		}
	}
}
