package resilience

import (
	"os"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"go.uber.org/goleak"

	"github.com/godwit-fusion/godwit/runtime/bench"
)

// rssBytes is this process's resident set size (Linux /proc/self/statm,
// second field, in pages); 0 elsewhere.
func rssBytes() uint64 {
	b, err := os.ReadFile("/proc/self/statm")
	if err != nil {
		return 0
	}
	f := strings.Fields(string(b))
	if len(f) < 2 {
		return 0
	}
	pages, err := strconv.ParseUint(f[1], 10, 64)
	if err != nil {
		return 0
	}
	return pages * uint64(os.Getpagesize())
}

func median(v []float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	return s[len(s)/2]
}

// Soak: the live daemon takes a message every 2 ms or so (20 targets, two
// sensors alternating; about 350/s here, timer-limited) for
// a bounded wall time, 30 s by default, GODWIT_SOAK=5m for longer. After a
// warm-up (the first 30 %), resident memory and the goroutine count of
// this process (daemon, feeder and consumer; the broker runs in a child
// process) must stay flat within 5 % (median of the last quarter against
// the median just after warm-up), and at the end no goroutine is left.
func TestSoakMemoryAndGoroutinesFlat(t *testing.T) {
	if testing.Short() {
		t.Skip("soak skipped with -short")
	}
	leaks := goleak.IgnoreCurrent()
	total := soakDuration(t, 30*time.Second)
	url := childBroker(t)
	cfg, err := bench.Config(bench.ConfigParams{BrokerURL: url, LidarMS: 4, RadarMS: 4, QueueLen: 1024})
	if err != nil {
		t.Fatal(err)
	}
	r := startDaemon(t, cfg, nil)
	k := newConsumer(t, url)
	f := startFeeder(t, url, 0, 20, 2*time.Millisecond)
	if !waitFor(10*time.Second, func() bool { return k.nT.Load() > 100 }) {
		t.Fatalf("no output: %d tracks messages", k.nT.Load())
	}
	start := time.Now()
	var at, rss, gor, heap []float64
	var ms runtime.MemStats
	for time.Since(start) < total {
		time.Sleep(500 * time.Millisecond)
		at = append(at, time.Since(start).Seconds()/total.Seconds())
		rss = append(rss, float64(rssBytes()))
		gor = append(gor, float64(runtime.NumGoroutine()))
		runtime.ReadMemStats(&ms)
		heap = append(heap, float64(ms.HeapAlloc))
		// The consumer's log grows by design; keep it short.
		k.mu.Lock()
		if len(k.tracks) > 1000 {
			k.tracks = append(k.tracks[:0], k.tracks[len(k.tracks)-100:]...)
		}
		if len(k.health) > 1000 {
			k.health = append(k.health[:0], k.health[len(k.health)-100:]...)
		}
		k.mu.Unlock()
	}
	window := func(v []float64, from, to float64) []float64 {
		var w []float64
		for i, a := range at {
			if a >= from && a < to {
				w = append(w, v[i])
			}
		}
		return w
	}
	st := r.d.Stats()
	t.Logf("%s: %d messages processed, %d dropped, %d tracks messages received", total, st.Pipeline.Messages, st.QueueDropped, k.nT.Load())
	for _, q := range []struct {
		name string
		v    []float64
	}{{"resident memory", rss}, {"goroutines", gor}, {"heap allocated (not judged: it swings with GC)", heap}} {
		a, b := median(window(q.v, 0.3, 0.55)), median(window(q.v, 0.75, 1.01))
		t.Logf("%s: median %.4g after warm-up, %.4g in the last quarter (%+.1f %%)", q.name, a, b, 100*(b-a)/a)
		if a == 0 {
			t.Logf("%s not measured on this system", q.name)
			continue
		}
		if q.name[0] == 'h' {
			continue
		}
		if b > a*1.05 {
			t.Errorf("%s grew %.1f %% (more than 5 %%) between warm-up and the end", q.name, 100*(b-a)/a)
		}
	}
	tr, _ := k.snapshot()
	for _, s := range tr {
		if s.bad {
			t.Fatal("a tracks message carried a non-finite or absurd value")
		}
	}
	if len(tr) == 0 || time.Since(time.Unix(0, tr[len(tr)-1].rxNs)) > time.Second {
		t.Error("no tracks message in the last second of the soak")
	}
	f.close()
	k.c.Close()
	r.close(t)
	goleak.VerifyNone(t, leaks)
}
