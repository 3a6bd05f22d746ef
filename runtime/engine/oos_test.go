package engine

import (
	"errors"
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"github.com/godwit-fusion/godwit/transport"
	"pgregory.net/rapid"
)

// sameTracks compares two final tracks messages: ids, life counters and
// every number to 1e-12 (relative above 1).
func sameTracks(a, b *transport.TracksMsg) string {
	if a.TNs != b.TNs {
		return "stamps differ"
	}
	if len(a.Tracks) != len(b.Tracks) {
		return "track counts differ"
	}
	close := func(x, y float64) bool { return math.Abs(x-y) <= 1e-12*math.Max(1, math.Abs(x)) }
	for i := range a.Tracks {
		p, q := &a.Tracks[i], &b.Tracks[i]
		if p.ID != q.ID || p.Status != q.Status || p.Hits != q.Hits || p.Misses != q.Misses ||
			p.UpdatedNs != q.UpdatedNs || p.Class != q.Class || len(p.State) != len(q.State) {
			return "track identity or life differs"
		}
		for k := range p.State {
			if !close(p.State[k], q.State[k]) {
				return "state differs"
			}
		}
		for k := range p.StateCov {
			if !close(p.StateCov[k], q.StateCov[k]) {
				return "covariance differs"
			}
		}
	}
	if (a.Ego == nil) != (b.Ego == nil) || (a.Ego != nil && *a.Ego != *b.Ego) {
		return "ego differs"
	}
	return ""
}

// TestOutOfSequenceEqualsInOrder is the exactness property of the lag
// window (DESIGN.md, "Out-of-sequence measurements"): any arrival order in
// which every measurement arrives less than lag_ms after its time gives the
// same final tracks as in-order arrival; a measurement older than the window
// is dropped, counted, and changes nothing.
func TestOutOfSequenceEqualsInOrder(t *testing.T) {
	rapid.Check(t, oosEqualsInOrder(rapid.IntRange(0, 3)))
}

// The same with the particle filter only: its tracks are reseeded from
// their ids at birth, which a rewind must reproduce.
func TestOutOfSequenceEqualsInOrderParticle(t *testing.T) {
	rapid.Check(t, oosEqualsInOrder(rapid.Just(3)))
}

func oosEqualsInOrder(filter *rapid.Generator[int]) func(*rapid.T) {
	return func(rt *rapid.T) {
		seed := rapid.Uint64().Draw(rt, "seed")
		combo := filter.Draw(rt, "filter")
		nTargets := rapid.IntRange(1, 4).Draw(rt, "targets")
		clutter := rapid.Float64Range(0, 2).Draw(rt, "clutter")
		r := rand.New(rand.NewPCG(seed, 7))
		a, b := rbSensor("mast_radar", 0, 0, 0), xySensor("mast_lidar", 1, -1, 30, 0.2)
		a.ClutterPerScan, b.ClutterPerScan = clutter, clutter
		a.PDetect, b.PDetect = 0.9, 0.9
		// Phase 0 puts both sensors on the same instants: ties in time
		// must be ordered the same whatever the arrival order.
		phase := int64(rapid.SampledFrom([]int{0, 17}).Draw(rt, "phase_ms")) * 1e6
		s := &sim{r: r, accelSD: 0.3, sensors: []simSensor{{cfg: a}, {cfg: b, phaseNs: phase}}}
		for k := 0; k < nTargets; k++ {
			s.targets = append(s.targets, simTarget{id: k + 1, x: [4]float64{
				r.Float64()*60 - 30, r.Float64()*60 - 30, r.NormFloat64(), r.NormFloat64()}})
		}
		msgs := s.run(t0 + 3e9)
		cfg := baseConfig(a, b)
		switch combo {
		case 1:
			cfg.Tracker.Motion, cfg.Tracker.Filter = "ctrv", "srukf"
		case 2:
			cfg.Tracker.Motion, cfg.Tracker.Filter = "ca", "srekf"
		case 3:
			cfg.Tracker.Motion, cfg.Tracker.Filter = "cv", "pf"
		}
		lag := int64(cfg.Timing.LagMS * 1e6)

		opt := Options{Particles: 200}
		inOrder, err := New(cfg, opt)
		if err != nil {
			rt.Fatal(err)
		}
		for i := range msgs {
			if err := inOrder.Ingest(&msgs[i].m, msgs[i].m.TNs); err != nil {
				rt.Fatal(err)
			}
		}
		// Arrivals: each message delayed by less than the lag window.
		type arr struct {
			i int
			t int64
		}
		order := make([]arr, len(msgs))
		for i := range msgs {
			order[i] = arr{i, msgs[i].m.TNs + r.Int64N(lag)}
		}
		sort.SliceStable(order, func(x, y int) bool { return order[x].t < order[y].t })
		late, err := New(cfg, opt)
		if err != nil {
			rt.Fatal(err)
		}
		var m transport.Measurement // one reused buffer, as the decoder does
		for _, o := range order {
			m = msgs[o.i].m
			m.Dets = append(m.Dets[:0:0], msgs[o.i].m.Dets...)
			if err := late.Ingest(&m, o.t); err != nil {
				rt.Fatalf("message %d: %v", o.i, err)
			}
			for k := range m.Dets { // the engine must have copied what it keeps
				m.Dets[k].Z = [3]float64{math.NaN(), math.NaN(), math.NaN()}
			}
		}
		var want, got transport.TracksMsg
		inOrder.Flush(&want)
		late.Flush(&got)
		if len(want.Tracks) == 0 || late.Counters().Rewinds == 0 {
			rt.Fatalf("scenario too weak: %d tracks, %d rewinds", len(want.Tracks), late.Counters().Rewinds)
		}
		if d := sameTracks(&want, &got); d != "" {
			rt.Fatalf("late arrivals inside the lag window changed the result: %s (rewinds %d)", d, late.Counters().Rewinds)
		}

		// Beyond the window: dropped, counted for its sensor, no change.
		old := msgs[0].m
		old.TNs = late.newestNs - lag - 1
		old.Seq = 1000
		if err := late.Ingest(&old, old.TNs+lag+2); !errors.Is(err, ErrLate) {
			rt.Fatalf("message older than the window: got %v, want ErrLate", err)
		}
		if c := late.Counters().LateDropped; c != 1 {
			rt.Fatalf("late_dropped = %d, want 1", c)
		}
		if st := late.Sensors(nil); st[0].LateDropped != 1 || st[1].LateDropped != 0 {
			rt.Fatalf("per-sensor late_dropped %d %d, want 1 0", st[0].LateDropped, st[1].LateDropped)
		}
		late.Flush(&got)
		want.Seq = got.Seq
		if d := sameTracks(&want, &got); d != "" {
			rt.Fatalf("a dropped measurement changed the tracks: %s", d)
		}
	}
}

// TestOutOfSequenceMovingPlatform: the same exactness with a moving
// platform, where a late odometry or GNSS message changes the ego estimate
// under every later detection, so the rewind must redo those too.
func TestOutOfSequenceMovingPlatform(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		seed := rapid.Uint64().Draw(rt, "seed")
		cfg, msgs, _ := movingScene(rt, seed, 3)
		lag := int64(cfg.Timing.LagMS * 1e6)
		inOrder, err := New(cfg, Options{})
		if err != nil {
			rt.Fatal(err)
		}
		for i := range msgs {
			if err := inOrder.Ingest(&msgs[i], msgs[i].TNs); err != nil {
				rt.Fatal(err)
			}
		}
		r := rand.New(rand.NewPCG(seed, 99))
		type arr struct {
			i int
			t int64
		}
		order := make([]arr, len(msgs))
		for i := range msgs {
			order[i] = arr{i, msgs[i].TNs + r.Int64N(lag)}
		}
		sort.SliceStable(order, func(x, y int) bool { return order[x].t < order[y].t })
		late, err := New(cfg, Options{})
		if err != nil {
			rt.Fatal(err)
		}
		for _, o := range order {
			if err := late.Ingest(&msgs[o.i], o.t); err != nil {
				rt.Fatalf("message %d: %v", o.i, err)
			}
		}
		var want, got transport.TracksMsg
		inOrder.Flush(&want)
		late.Flush(&got)
		if len(want.Tracks) == 0 || want.Ego == nil || late.Counters().Rewinds == 0 {
			rt.Fatalf("scenario too weak: %d tracks, %d rewinds", len(want.Tracks), late.Counters().Rewinds)
		}
		if d := sameTracks(&want, &got); d != "" {
			rt.Fatalf("late arrivals changed the result on a moving platform: %s", d)
		}
	})
}

// TestRewindReprocessesWhatFollows: a message displaced behind k newer
// scans restores one snapshot and processes exactly those k scans again
// (the reprocessing solution of DESIGN.md: cost linear in k).
func TestRewindReprocessesWhatFollows(t *testing.T) {
	for _, k := range []int{1, 2, 5, 9} {
		e := mustNew(t, baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2), xySensor("mast_lidar_2", 0, 0, 0, 0.2)))
		for i := 0; i < 10; i++ {
			tn := t0 + int64(i)*2e7
			e.Ingest(xyMsg(0, uint64(i+1), tn, [2]float64{10, 5}), tn)
		}
		lateT := t0 + int64(9-k)*2e7 + 1e7 // between scans 9−k and 10−k
		before := e.Counters()
		if err := e.Ingest(xyMsg(1, 1, lateT, [2]float64{10, 5}), t0+2e8); err != nil {
			t.Fatal(err)
		}
		after := e.Counters()
		if after.Rewinds-before.Rewinds != 1 || after.Reprocessed-before.Reprocessed != uint64(k) {
			t.Errorf("k = %d: %d rewinds, %d scans reprocessed", k, after.Rewinds-before.Rewinds, after.Reprocessed-before.Reprocessed)
		}
	}
}

// TestMaxScansBoundsTheWindow: when more scans than MaxScans fall in the
// lag window, the oldest leave it early, and a message older than the
// oldest kept scan is dropped as late rather than rewinding past it.
func TestMaxScansBoundsTheWindow(t *testing.T) {
	cfg := baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2), xySensor("mast_lidar_2", 0, 0, 0, 0.2))
	e, err := New(cfg, Options{MaxScans: 8})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 20; i++ { // 1 ms apart: all inside the 300 ms window
		tn := t0 + int64(i)*1e6
		e.Ingest(xyMsg(0, uint64(i+1), tn, [2]float64{10, 5}), tn)
	}
	if len(e.log) != 8 {
		t.Fatalf("log holds %d scans, MaxScans 8", len(e.log))
	}
	if err := e.Ingest(xyMsg(1, 1, t0+5e5, [2]float64{10, 5}), t0+2e7); !errors.Is(err, ErrLate) {
		t.Fatalf("message before the kept scans: %v, want ErrLate", err)
	}
	if err := e.Ingest(xyMsg(1, 2, t0+15e6+5e5, [2]float64{10, 5}), t0+2e7); err != nil {
		t.Fatalf("message inside the kept scans: %v", err)
	}
}
