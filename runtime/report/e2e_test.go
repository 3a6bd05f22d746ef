package report

import (
	"bytes"
	"context"
	"math"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/examples/scenario"
	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/runtime/eval"
	"github.com/godwit-fusion/godwit/transport"
	"github.com/valyala/fastjson"
)

// run is one simulated scenario replayed through the engine and scored.
type run struct {
	sc     *scenario.Scenario
	truth  []eval.TruthLine
	tracks []transport.TracksMsg
	ev     *eval.Evaluator
	sum    *daemon.Summary
}

// simulateAndScore generates a scenario with the simulator, replays the
// recording through the daemon's replay pipeline (the same path as godwit
// replay) and scores the tracks. The raw detections of every tracking
// sensor, placed in the site frame with the true platform pose, are scored
// as the baseline; the engine's per-sensor NIS is sampled every 0.5 s of
// arrival time in a second pass over the same arrivals.
func simulateAndScore(t *testing.T, name string, seconds float64) *run {
	t.Helper()
	sc, err := scenario.Open(name)
	if err != nil {
		t.Fatal(err)
	}
	opt := scenario.Options{Seconds: seconds}
	var rec, truthBuf bytes.Buffer
	if _, err := sc.Write(&rec, &truthBuf, opt); err != nil {
		t.Fatal(err)
	}
	out, err := sc.Simulate(opt)
	if err != nil {
		t.Fatal(err)
	}
	truth, err := eval.ReadTruth(&truthBuf)
	if err != nil {
		t.Fatal(err)
	}
	var tracksBuf bytes.Buffer
	sum, err := daemon.Replay(context.Background(), sc.Config, bytes.NewReader(rec.Bytes()),
		daemon.ReplayOutput{Tracks: &tracksBuf}, daemon.ReplayOptions{})
	if err != nil {
		t.Fatal(err)
	}
	tracks, err := eval.ReadTracks(&tracksBuf)
	if err != nil {
		t.Fatal(err)
	}
	ev, err := eval.New(truth, eval.Options{})
	if err != nil {
		t.Fatal(err)
	}
	for i := range tracks {
		if err := ev.AddTracks(&tracks[i]); err != nil {
			t.Fatal(err)
		}
	}
	addBaseline(t, sc, out, ev)
	addNISAndLatency(t, sc.Config, out, ev)
	return &run{sc: sc, truth: truth, tracks: tracks, ev: ev, sum: sum}
}

func addBaseline(t *testing.T, sc *scenario.Scenario, out *scenario.Output, ev *eval.Evaluator) {
	t.Helper()
	var p fastjson.Parser
	start := sc.Start.UnixNano()
	for _, m := range out.Messages {
		if m.Malformed {
			continue
		}
		cs := &sc.Config.Sensors[m.Sensor]
		if configs.IsEgoKind(cs.Kind) {
			continue
		}
		v, err := p.ParseBytes(m.Payload)
		if err != nil {
			t.Fatalf("simulated payload: %v", err)
		}
		plat := sc.Ego.At(float64(m.TrueNs-start) / 1e9)
		sp := scenario.MountedPose(plat, cs.Mount.X, cs.Mount.Y, cs.Mount.YawDeg*math.Pi/180)
		var pos [][2]float64
		for _, d := range v.GetArray("dets") {
			z := d.GetArray("z")
			lx, ly := inverse(cs, z[0].GetFloat64(), z[1].GetFloat64())
			c, s := math.Cos(sp.Yaw), math.Sin(sp.Yaw)
			pos = append(pos, [2]float64{sp.Pos.X + c*lx - s*ly, sp.Pos.Y + s*lx + c*ly})
		}
		if err := ev.AddDetections(cs.Name, m.TrueNs, pos); err != nil {
			t.Fatal(err)
		}
	}
}

// inverse places a detection in the sensor frame (DESIGN.md measurement
// models): position_xy is the point; range_bearing(_rate) r·(cos b, sin b);
// pinhole u = cx − fx·y/x with range r gives y/x = (cx − u)/fx.
func inverse(cs *configs.Sensor, z0, z1 float64) (x, y float64) {
	switch cs.Kind {
	case configs.KindPositionXY:
		return z0, z1
	case configs.KindPinhole:
		q := (cs.CX - z0) / cs.FX
		x = z1 / math.Sqrt(1+q*q)
		return x, q * x
	default:
		return z0 * math.Cos(z1), z0 * math.Sin(z1)
	}
}

func addNISAndLatency(t *testing.T, cfg *configs.Config, out *scenario.Output, ev *eval.Evaluator) {
	t.Helper()
	pl, err := daemon.NewPipeline(cfg, engine.Options{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	next := int64(0)
	for _, m := range out.Messages {
		w := time.Now()
		_ = pl.Handle(m.Topic, m.Payload, m.RxNs)
		pl.Advance(m.RxNs)
		// Processing time per arrival, the only latency a test can measure
		// here; it shows the histogram, nothing asserts on it.
		if err := ev.AddLatency(float64(time.Since(w).Nanoseconds()) / 1e6); err != nil {
			t.Fatal(err)
		}
		if m.RxNs < next {
			continue
		}
		next = m.RxNs + 500e6
		for i, st := range pl.Engine().Sensors(nil) {
			if st.NISCount == 0 {
				continue
			}
			dim := configs.MeasDim(cfg.Sensors[i].Kind)
			if err := ev.AddNIS(st.Name, dim, eval.NISPoint{TNs: m.RxNs, Mean: st.MeanNIS, N: st.NISCount}); err != nil {
				t.Fatal(err)
			}
		}
	}
}

// End to end: 20 s of two shipped scenarios, simulated, replayed and
// scored. Thresholds: the tracks' mean GOSPA under half that of the best
// sensor's raw detections (the point of fusing them), and the position
// NEES mean within [0.5, 6] for a 2-dimensional error: expected 2 when
// consistent (Bar-Shalom, Li & Kirubarajan 2001 §5.4); the band is wide
// because a moving platform adds its own pose error, which the position
// covariance carries only to first order. On "crossing" (two targets pass
// 1 m apart, the association test the scenario is made for) no id may
// switch; campus-shuttle must estimate its own position to under 3 m RMSE
// (GNSS s.d. 1.2 m per axis).
func TestEndToEnd(t *testing.T) {
	if testing.Short() {
		t.Skip("simulates and replays 20 s of two scenarios")
	}
	for _, name := range []string{"campus-shuttle", "crossing"} {
		t.Run(name, func(t *testing.T) { endToEnd(t, name) })
	}
}

func endToEnd(t *testing.T, name string) {
	r := simulateAndScore(t, name, 20)
	s := r.ev.Summary()
	best := math.Inf(1)
	for _, b := range s.Baseline {
		best = math.Min(best, float64(b.Mean))
		t.Logf("baseline %s: %d scans, GOSPA %.3g", b.Sensor, b.Scans, float64(b.Mean))
	}
	t.Logf("tracks: GOSPA %.3g, RMSE %.3g, NEES %.3g (%.0f%% of epochs inside), switches %d, fragmentations %d",
		float64(s.GOSPA.Mean), float64(s.PositionRMSE), float64(s.NEES.Mean), 100*float64(s.NEES.InsideFraction),
		s.IDSwitches, s.Fragmentations)
	// One epoch per output period (output.rate_hz), all but the first
	// seconds at least.
	if want := int(15 * r.sc.Config.Output.RateHz); s.Epochs < want {
		t.Fatalf("%d epochs scored, want ≥ %d (15 s at output.rate_hz)", s.Epochs, want)
	}
	if g := float64(s.GOSPA.Mean); !(g < best/2) {
		t.Errorf("tracks GOSPA %.3g, best raw detections %.3g: want under half", g, best)
	}
	if n := float64(s.NEES.Mean); !(n >= 0.5 && n <= 6) {
		t.Errorf("NEES mean %.3g outside [0.5, 6]", n)
	}
	switch name {
	case "campus-shuttle":
		if s.Ego == nil || !(float64(s.Ego.PosRMSE) < 3) {
			t.Errorf("ego %+v, want a position RMSE under 3 m", s.Ego)
		}
	case "crossing":
		if s.IDSwitches != 0 {
			t.Errorf("%d id switches at the crossing, want 0", s.IDSwitches)
		}
	}

	dir := os.Getenv("GODWIT_REPORT_DIR")
	if dir == "" {
		dir = t.TempDir()
	} else {
		dir = filepath.Join(dir, name)
	}
	in := FromEvaluator(r.ev, r.truth, r.tracks)
	in.Title = name + ", 20 s"
	in.Run = []Field{{"scenario", r.sc.Name}, {"messages replayed", fmtUint(r.sum.Messages)},
		{"tracks confirmed", fmtUint(r.sum.TracksConfirmed)},
		{"latency samples", "engine processing time per arrival, measured by the test"}}
	files, err := Write(dir, in)
	if err != nil {
		t.Fatal(err)
	}
	checkReport(t, dir, files)
}
