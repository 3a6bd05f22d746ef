package eval

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/godwit-fusion/godwit/transport"
	"gonum.org/v1/gonum/mat"
	"pgregory.net/rapid"
)

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol*math.Max(1, math.Abs(b)) }

const t0 = int64(1_772_438_400_000_000_000)

func ms(k int64) int64 { return t0 + k*1e6 }

func obj(id string, x, y float64) TruthObject { return TruthObject{ID: id, Pos: [2]float64{x, y}} }

func trk(id uint64, status string, x, y float64) transport.Track {
	return transport.Track{ID: id, Status: status, Pos: [2]float64{x, y}, PosCov: [4]float64{1, 0, 0, 1}}
}

func msg(t int64, tracks ...transport.Track) *transport.TracksMsg {
	return &transport.TracksMsg{V: 1, TNs: t, Frame: "site", Tracks: tracks}
}

func mustNew(t *testing.T, truth []TruthLine, o Options) *Evaluator {
	t.Helper()
	e, err := New(truth, o)
	if err != nil {
		t.Fatal(err)
	}
	return e
}

func add(t *testing.T, e *Evaluator, m *transport.TracksMsg) {
	t.Helper()
	if err := e.AddTracks(m); err != nil {
		t.Fatal(err)
	}
}

// One missed target, c = 10, p = 2, α = 2: GOSPA = (c^p/2)^(1/p) = √50
// (Rahmathullah, García-Fernández & Svensson 2017, eq. 2); OSPA = c
// (Schuhmacher, Vo & Vo 2008, eq. 3: one set empty gives the cut-off).
func TestOneMissedTarget(t *testing.T) {
	truth := []TruthLine{{TNs: ms(0), Objects: []TruthObject{obj("p1", 3, 4)}}}
	e := mustNew(t, truth, Options{C: 10})
	add(t, e, msg(ms(0)))
	s := e.Summary()
	if !near(float64(s.GOSPA.Mean), math.Sqrt(50), 1e-12) || float64(s.GOSPA.Missed) != 50 ||
		float64(s.GOSPA.MissedCount) != 1 || float64(s.GOSPA.False) != 0 || float64(s.GOSPA.Loc) != 0 {
		t.Errorf("GOSPA %+v, want √50 all missed", s.GOSPA)
	}
	if float64(s.OSPA) != 10 {
		t.Errorf("OSPA %v, want c = 10", s.OSPA)
	}
}

// Worked OSPA cases from Schuhmacher, Vo & Vo 2008, eq. 3, by hand.
func TestOSPAHandWorked(t *testing.T) {
	cases := []struct {
		name   string
		c, p   float64
		x, y   [][2]float64
		want   float64
		reason string
	}{
		{"both empty", 10, 2, nil, nil, 0, "d = 0 by definition"},
		{"one vs none", 10, 2, [][2]float64{{0, 0}}, nil, 10, "(c^p·1/1)^(1/p) = c"},
		{"pair plus extra", 10, 2, [][2]float64{{0, 0}}, [][2]float64{{3, 4}, {100, 0}}, math.Sqrt(62.5), "((5² + 10²)/2)^(1/2)"},
		{"pair beyond c", 10, 2, [][2]float64{{0, 0}}, [][2]float64{{20, 0}}, 10, "min(20, c)^2 = 100, √100"},
		{"p = 1", 5, 1, [][2]float64{{0, 0}, {10, 0}}, [][2]float64{{1, 0}}, 3, "(1 + 5)/2"},
		{"crossed labels", 20, 2, [][2]float64{{0, 0}, {10, 0}}, [][2]float64{{9, 0}, {1, 0}}, 1, "((1 + 1)/2)^(1/2)"},
	}
	for _, c := range cases {
		e := mustNew(t, nil, Options{C: 1, OSPAC: c.c, P: c.p})
		got, err := e.ospa(c.x, c.y)
		if err != nil || !near(got, c.want, 1e-12) {
			t.Errorf("%s: got %v %v, want %v (%s)", c.name, got, err, c.want, c.reason)
		}
		// OSPA is symmetric in its arguments (a metric).
		if got2, _ := e.ospa(c.y, c.x); !near(got2, got, 1e-12) {
			t.Errorf("%s: not symmetric: %v vs %v", c.name, got, got2)
		}
	}
}

// bruteOSPA evaluates eq. 3 of Schuhmacher, Vo & Vo 2008 literally, over
// every injection of the smaller set into the larger.
func bruteOSPA(x, y [][2]float64, c, p float64) float64 {
	if len(x) > len(y) {
		x, y = y, x
	}
	m, n := len(x), len(y)
	if n == 0 {
		return 0
	}
	best := math.Inf(1)
	used := make([]bool, n)
	var rec func(i int, acc float64)
	rec = func(i int, acc float64) {
		if i == m {
			best = math.Min(best, acc)
			return
		}
		for j := 0; j < n; j++ {
			if !used[j] {
				used[j] = true
				rec(i+1, acc+math.Pow(math.Min(dist(x[i], y[j]), c), p))
				used[j] = false
			}
		}
	}
	rec(0, 0)
	return math.Pow((best+math.Pow(c, p)*float64(n-m))/float64(n), 1/p)
}

// The OSPA read off gospa's assignment equals the definition evaluated by
// brute force, on random small sets.
func TestOSPAAgainstDefinition(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		pts := func(label string) [][2]float64 {
			k := rapid.IntRange(0, 5).Draw(rt, label+"n")
			v := make([][2]float64, k)
			for i := range v {
				v[i] = [2]float64{rapid.Float64Range(-20, 20).Draw(rt, label+"x"), rapid.Float64Range(-20, 20).Draw(rt, label+"y")}
			}
			return v
		}
		x, y := pts("x"), pts("y")
		c := rapid.Float64Range(0.5, 15).Draw(rt, "c")
		p := rapid.SampledFrom([]float64{1, 2, 3}).Draw(rt, "p")
		e, err := New(nil, Options{C: 1, OSPAC: c, P: p})
		if err != nil {
			rt.Fatal(err)
		}
		got, err := e.ospa(x, y)
		want := bruteOSPA(x, y, c, p)
		if err != nil || !near(got, want, 1e-9) {
			rt.Fatalf("ospa %v (%v), definition %v", got, err, want)
		}
	})
}

// Position RMSE and NEES on tiny hand-computed cases.
func TestRMSEAndNEES(t *testing.T) {
	truth := []TruthLine{
		{TNs: ms(0), Objects: []TruthObject{obj("a", 0, 0)}},
		{TNs: ms(100), Objects: []TruthObject{obj("a", 0, 0)}},
	}
	e := mustNew(t, truth, Options{C: 10})
	t1 := trk(1, "confirmed", 3, 4)
	t1.PosCov = [4]float64{9, 0, 0, 16} // NEES = 9/9 + 16/16 = 2
	add(t, e, msg(ms(0), t1))
	t2 := trk(1, "coasting", 1, 0)
	t2.PosCov = [4]float64{2, 1, 1, 2} // P⁻¹ = [2 −1; −1 2]/3, eᵀP⁻¹e = 2/3
	add(t, e, msg(ms(100), t2))
	s := e.Summary()
	// √((25 + 1)/2) = √13.
	if s.MatchedPairs != 2 || !near(float64(s.PositionRMSE), math.Sqrt(13), 1e-12) {
		t.Errorf("pairs %d rmse %v, want 2, √13", s.MatchedPairs, s.PositionRMSE)
	}
	if !near(float64(s.NEES.Mean), (2+2.0/3)/2, 1e-12) || s.NEES.Pairs != 2 || s.NEES.Epochs != 2 {
		t.Errorf("NEES %+v, want mean 4/3 over 2 pairs", s.NEES)
	}
	// Both per-epoch values (2 and 2/3) lie in χ²(2)'s 95% interval
	// [0.0506, 7.378]: inside fraction 1.
	if float64(s.NEES.InsideFraction) != 1 {
		t.Errorf("inside %v, want 1", s.NEES.InsideFraction)
	}
	ep := e.Epochs()
	if !near(ep[0].GOSPA, 5, 1e-12) || !near(ep[1].GOSPA, 1, 1e-12) {
		t.Errorf("epoch GOSPA %v %v, want 5 and 1 (one pair each)", ep[0].GOSPA, ep[1].GOSPA)
	}
}

// χ²(2) is the exponential law with mean 2, so its quantiles are
// −2·ln(1 − q) in closed form (a fact of the distribution); χ²(100) from
// the NIST/SEMATECH e-Handbook table 1.3.6.7.4 (from memory: 74.222 and
// 129.561).
func TestChiSquareBounds(t *testing.T) {
	lo, hi := ChiSquareBounds(2, 1)
	if !near(lo, -2*math.Log(0.975), 1e-9) || !near(hi, -2*math.Log(0.025), 1e-9) {
		t.Errorf("χ²(2) 95%%: [%v, %v], want [%v, %v]", lo, hi, -2*math.Log(0.975), -2*math.Log(0.025))
	}
	lo, hi = ChiSquareBounds(2, 50)
	if math.Abs(lo*50-74.222) > 5e-3 || math.Abs(hi*50-129.561) > 5e-3 {
		t.Errorf("χ²(100) 95%%: [%v, %v], want [74.222, 129.561]", lo*50, hi*50)
	}
	if lo, _ := ChiSquareBounds(0, 3); !math.IsNaN(lo) {
		t.Errorf("dim 0: %v, want NaN", lo)
	}
}

// A scripted sequence for one object at the origin (definitions in the
// comment of score).
func TestIDSwitchesAndFragmentations(t *testing.T) {
	var truth []TruthLine
	for k := int64(0); k < 8; k++ {
		truth = append(truth, TruthLine{TNs: ms(100 * k), Objects: []TruthObject{obj("a", 0, 0)}})
	}
	e := mustNew(t, truth, Options{C: 5})
	steps := [][]transport.Track{
		{trk(1, "tentative", 0.1, 0)}, // 0: tentative does not count: unmatched
		{trk(1, "confirmed", 0.1, 0)}, // 1: matched to 1 (confirmed at 100 ms)
		{trk(1, "coasting", 0.2, 0)},  // 2: still 1
		{},                            // 3: gap
		{trk(2, "confirmed", 0.1, 0)}, // 4: back with id 2: one switch, one fragmentation
		{trk(2, "confirmed", 1, 0), trk(3, "confirmed", 0, 0)}, // 5: keeps 2 although 3 is closer (CLEAR MOT continuity)
		{trk(3, "confirmed", 0, 0)},                            // 6: only 3: second switch, no fragmentation
		{trk(3, "confirmed", 9, 0)},                            // 7: 3 beyond c: unmatched
	}
	for k, s := range steps {
		add(t, e, msg(ms(100*int64(k)), s...))
	}
	s := e.Summary()
	if s.IDSwitches != 2 || s.Fragmentations != 1 {
		t.Errorf("switches %d fragmentations %d, want 2 and 1", s.IDSwitches, s.Fragmentations)
	}
	if s.MatchedPairs != 5 || s.TrackIDs != 3 {
		t.Errorf("pairs %d track ids %d, want 5 and 3", s.MatchedPairs, s.TrackIDs)
	}
	oc := s.TimeToConfirm.Objects
	if len(oc) != 1 || oc[0].ID != "a" || float64(oc[0].Seconds) != 0.1 || s.TimeToConfirm.Confirmed != 1 {
		t.Errorf("time to confirm %+v, want a after 0.1 s", s.TimeToConfirm)
	}
	// Epoch 5: GOSPA takes the optimal pair (track 3, 0 m) and one false
	// track, GOSPA² = 0 + 25/2, while the continuity match stays on track 2.
	if ep := e.Epochs()[5]; !near(ep.GOSPA, math.Sqrt(12.5), 1e-12) || ep.False != 1 || ep.Matched != 1 {
		t.Errorf("epoch 5 %+v, want GOSPA √12.5, one false, one pair", ep)
	}
}

// Two objects whose tracks swap: each object changes id once.
func TestSwappedTracks(t *testing.T) {
	var truth []TruthLine
	for k := int64(0); k < 4; k++ {
		truth = append(truth, TruthLine{TNs: ms(100 * k), Objects: []TruthObject{obj("a", 0, 0), obj("b", 20, 0)}})
	}
	e := mustNew(t, truth, Options{C: 5})
	add(t, e, msg(ms(0), trk(1, "confirmed", 0, 0), trk(2, "confirmed", 20, 0)))
	add(t, e, msg(ms(100), trk(1, "confirmed", 0.5, 0), trk(2, "confirmed", 19.5, 0)))
	add(t, e, msg(ms(200), trk(2, "confirmed", 0.5, 0), trk(1, "confirmed", 19.5, 0)))
	add(t, e, msg(ms(300), trk(2, "confirmed", 0, 0), trk(1, "confirmed", 20, 0)))
	if s := e.Summary(); s.IDSwitches != 2 || s.Fragmentations != 0 {
		t.Errorf("switches %d fragmentations %d, want 2 and 0", s.IDSwitches, s.Fragmentations)
	}
}

// Truth interpolated to the tracks' times; the tolerance rule.
func TestAlignment(t *testing.T) {
	truth := []TruthLine{
		{TNs: ms(0), Objects: []TruthObject{{ID: "a", Pos: [2]float64{0, 0}, Vel: [2]float64{10, 0}}}, Ego: &TruthEgo{Yaw: math.Pi - 0.1}},
		{TNs: ms(100), Objects: []TruthObject{{ID: "a", Pos: [2]float64{1, 0}, Vel: [2]float64{10, 0}}, {ID: "b", Pos: [2]float64{50, 0}}},
			Ego: &TruthEgo{Pos: [2]float64{2, 0}, Yaw: -math.Pi + 0.1}},
	}
	cases := []struct {
		t     int64
		ok    bool
		ids   string
		ax    float64
		egoX  float64
		egoYw float64
	}{
		{ms(50), true, "a", 0.5, 1, math.Pi},          // halfway; yaw through ±π, not through 0
		{ms(40), true, "a", 0.4, 0.8, math.Pi - 0.02}, // b only on the farther line: absent
		{ms(60), true, "ab", 0.6, 1.2, -math.Pi + 0.02},
		{ms(300), true, "ab", 3, 2, -math.Pi + 0.1}, // past the end, within 250 ms: carried at its velocity
		{ms(-200), true, "a", -2, 0, math.Pi - 0.1},
		{ms(400), false, "", 0, 0, 0}, // 300 ms past the end
	}
	for _, c := range cases {
		objs, ego, hasEgo, ok := truthAt(truth, c.t, 250e6, nil)
		if ok != c.ok {
			t.Errorf("t %d ms: ok %v, want %v", (c.t-t0)/1e6, ok, c.ok)
			continue
		}
		if !ok {
			continue
		}
		ids := ""
		for _, o := range objs {
			ids += o.ID
		}
		if ids != c.ids || !near(objs[0].Pos[0], c.ax, 1e-12) || !hasEgo || !near(ego.Pos[0], c.egoX, 1e-12) ||
			math.Abs(math.Remainder(ego.Yaw-c.egoYw, 2*math.Pi)) > 1e-12 {
			t.Errorf("t %d ms: %v ego %+v, want ids %q a.x %v ego x %v yaw %v", (c.t-t0)/1e6, objs, ego, c.ids, c.ax, c.egoX, c.egoYw)
		}
	}
	e := mustNew(t, truth, Options{})
	add(t, e, msg(ms(400)))
	if s := e.Summary(); s.Epochs != 0 || s.EpochsSkipped != 1 {
		t.Errorf("epochs %d skipped %d, want 0 and 1", s.Epochs, s.EpochsSkipped)
	}
	if err := e.AddTracks(msg(ms(300))); err != nil || e.Summary().OutOfOrder != 1 {
		t.Errorf("older message: %v, want it skipped and counted", err)
	}
}

// Ego error: estimate (3, 4) m and 0.1 rad off the truth.
func TestEgoError(t *testing.T) {
	truth := []TruthLine{{TNs: ms(0), Ego: &TruthEgo{Yaw: 0.05}}}
	e := mustNew(t, truth, Options{})
	m := msg(ms(0))
	m.Ego = &transport.Ego{Pos: [2]float64{3, 4}, Yaw: 0.15}
	add(t, e, m)
	s := e.Summary()
	if s.Ego == nil || s.Ego.Epochs != 1 || !near(float64(s.Ego.PosRMSE), 5, 1e-12) ||
		!near(float64(s.Ego.YawRMSDeg), 0.1*180/math.Pi, 1e-9) {
		t.Errorf("ego %+v, want 5 m, 5.73°", s.Ego)
	}
}

// Only counted statuses, finite positions and objects within MaxRange of
// the true ego are scored.
func TestWhatCounts(t *testing.T) {
	truth := []TruthLine{{TNs: ms(0), Objects: []TruthObject{obj("near", 1, 0), obj("far", 100, 0)}, Ego: &TruthEgo{}}}
	e := mustNew(t, truth, Options{MaxRange: 50})
	add(t, e, msg(ms(0), trk(1, "confirmed", 1, 0), trk(2, "confirmed", 100, 0), trk(3, "tentative", 5, 5),
		trk(4, "coasting", math.NaN(), 0)))
	s := e.Summary()
	if s.TruthObjects != 1 || s.TrackIDs != 1 || s.TracksIgnored != 1 || float64(s.GOSPA.Mean) != 0 {
		t.Errorf("%+v: want one object, one track, one ignored, GOSPA 0", s)
	}
	e = mustNew(t, truth, Options{Statuses: []string{"confirmed"}})
	add(t, e, msg(ms(0), trk(1, "coasting", 1, 0)))
	if s := e.Summary(); s.MatchedPairs != 0 || float64(s.GOSPA.MissedCount) != 2 {
		t.Errorf("confirmed only: %+v, want the coasting track left out", s.GOSPA)
	}
}

// Baseline: one scan with one detection 3-4-5 off and one clutter point far
// away, c = 10, p = 2: GOSPA² = 25 + 50 (Rahmathullah et al. 2017, eq. 2).
func TestBaseline(t *testing.T) {
	truth := []TruthLine{{TNs: ms(0), Objects: []TruthObject{obj("a", 0, 0)}}}
	e := mustNew(t, truth, Options{C: 10})
	if err := e.AddDetections("radar", ms(10), [][2]float64{{3, 4}, {60, 0}}); err != nil {
		t.Fatal(err)
	}
	if err := e.AddDetections("radar", ms(9999), nil); err != nil {
		t.Fatal(err)
	}
	if err := e.AddDetections("radar", ms(0), [][2]float64{{math.Inf(1), 0}}); err == nil {
		t.Error("non-finite detection accepted")
	}
	b := e.Summary().Baseline
	if len(b) != 1 || b[0].Scans != 1 || b[0].Skipped != 1 || !near(float64(b[0].Mean), math.Sqrt(75), 1e-12) {
		t.Errorf("baseline %+v, want one scan with GOSPA √75, one skipped", b)
	}
}

// Latency quantiles by hand (nearest rank: the ⌈q·n⌉-th smallest, common
// practice): for 1..100 ms, p50 = 50 and p99 = 99.
func TestLatencyAndNIS(t *testing.T) {
	e := mustNew(t, nil, Options{})
	for i := 100; i >= 1; i-- {
		if err := e.AddLatency(float64(i)); err != nil {
			t.Fatal(err)
		}
	}
	if e.AddLatency(-1) == nil || e.AddLatency(math.NaN()) == nil {
		t.Error("bad latency accepted")
	}
	for _, p := range []NISPoint{{ms(0), 2.1, 1}, {ms(1), 9, 1}, {ms(2), 2, 64}} {
		if err := e.AddNIS("radar", 3, p); err != nil {
			t.Fatal(err)
		}
	}
	if e.AddNIS("radar", 2, NISPoint{ms(3), 1, 1}) == nil || e.AddNIS("cam", 2, NISPoint{ms(3), 1, 0}) == nil {
		t.Error("bad NIS sample accepted")
	}
	s := e.Summary()
	if l := s.Latency; l == nil || l.Samples != 100 || l.P50 != 50 || l.P99 != 99 || l.Max != 100 {
		t.Errorf("latency %+v, want 100 samples, 50, 99, 100", s.Latency)
	}
	// χ²(3) 95%: [0.216, 9.348] (NIST/SEMATECH table, from memory): 2.1
	// inside, 9 inside, and a mean of 2 over 64 updates is below
	// χ²_{0.025}(192)/64 ≈ 2.43: two of three inside.
	if n := s.NIS; len(n) != 1 || n[0].Samples != 3 || !near(float64(n[0].InsideFraction), 2.0/3, 1e-12) {
		t.Errorf("NIS %+v, want 3 samples, 2/3 inside", s.NIS)
	}
	if s.BadSamples != 4 {
		t.Errorf("bad samples %d, want 4", s.BadSamples)
	}
}

func TestOptions(t *testing.T) {
	for _, o := range []Options{{Alpha: 1}, {C: -1}, {P: 0.5}, {C: math.Inf(1)}, {MatchDist: math.NaN()}, {TruthTolNs: -1}, {MaxRange: -2}} {
		if _, err := New(nil, o); !errors.Is(err, ErrOptions) {
			t.Errorf("%+v: %v, want ErrOptions", o, err)
		}
	}
	if _, err := New([]TruthLine{{TNs: 5}, {TNs: 5}}, Options{}); err == nil {
		t.Error("truth with repeated t_ns accepted")
	}
	e := mustNew(t, nil, Options{})
	if o := e.Options(); o.C != 5 || o.P != 2 || o.Alpha != 2 || o.MatchDist != 5 || o.TruthTolNs != 250e6 ||
		strings.Join(o.Statuses, ",") != "confirmed,coasting" {
		t.Errorf("defaults %+v", o)
	}
}

// summary.json: keys in the documented order, undefined values as null.
func TestSummaryJSON(t *testing.T) {
	e := mustNew(t, nil, Options{})
	b, err := e.Summary().JSON()
	if err != nil {
		t.Fatal(err)
	}
	var top map[string]json.RawMessage
	if err := json.Unmarshal(b, &top); err != nil {
		t.Fatal(err)
	}
	order := []string{"params", "epochs", "epochs_skipped", "out_of_order", "tracks_ignored", "truth_objects",
		"track_ids", "gospa", "ospa_mean", "matched_pairs", "position_rmse", "nees", "id_switches",
		"fragmentations", "time_to_confirm", "ego", "baseline", "nis", "latency", "bad_samples"}
	at := -1
	for _, k := range order {
		i := bytes.Index(b, []byte(`"`+k+`":`))
		if i < at {
			t.Errorf("key %q out of order", k)
		}
		at = i
	}
	if len(top) != len(order) {
		t.Errorf("%d keys, want %d", len(top), len(order))
	}
	if string(top["ospa_mean"]) != "null" || string(top["ego"]) != "null" {
		t.Errorf("undefined values: ospa %s ego %s, want null", top["ospa_mean"], top["ego"])
	}
	var back Summary
	if err := json.Unmarshal(b, &back); err != nil || !math.IsNaN(float64(back.GOSPA.Mean)) {
		t.Errorf("round trip: %v %v", err, back.GOSPA.Mean)
	}
}

// The text table carries the values of a hand-worked case: the one missed
// target of TestOneMissedTarget (GOSPA √50 = 7.07, missed part 50).
func TestSummaryString(t *testing.T) {
	truth := []TruthLine{{TNs: ms(0), Objects: []TruthObject{obj("p1", 3, 4)}}}
	e := mustNew(t, truth, Options{C: 10})
	add(t, e, msg(ms(0)))
	got := e.Summary().String()
	for _, want := range []string{"GOSPA mean             7.07 m", "missed 50, false 0", "position RMSE          — m over 0 pairs", "(0 confirmed, 1 never)"} {
		if !strings.Contains(got, want) {
			t.Errorf("table lacks %q:\n%s", want, got)
		}
	}
}

// posNEES against gonum: eᵀP⁻¹e by a Cholesky solve (mat.Cholesky) on
// random positive definite P.
func TestPosNEESAgainstGonum(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		a := rapid.Float64Range(0.01, 50).Draw(rt, "a")
		d := rapid.Float64Range(0.01, 50).Draw(rt, "d")
		rho := rapid.Float64Range(-0.99, 0.99).Draw(rt, "rho")
		b := rho * math.Sqrt(a*d)
		ex, ey := rapid.Float64Range(-10, 10).Draw(rt, "ex"), rapid.Float64Range(-10, 10).Draw(rt, "ey")
		var ch mat.Cholesky
		if !ch.Factorize(mat.NewSymDense(2, []float64{a, b, b, d})) {
			rt.Skip("not positive definite in floating point")
		}
		e := mat.NewVecDense(2, []float64{ex, ey})
		var x mat.VecDense
		if err := ch.SolveVecTo(&x, e); err != nil {
			rt.Skip(err)
		}
		want := mat.Dot(e, &x)
		got, ok := posNEES(ex, ey, [4]float64{a, b, b, d})
		if !ok || !near(got, want, 1e-8) {
			rt.Fatalf("posNEES %v (%v), gonum %v", got, ok, want)
		}
	})
}
