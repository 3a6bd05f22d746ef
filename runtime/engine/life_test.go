package engine

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/filters/geo"
	"github.com/godwit-fusion/godwit/transport"
)

func xyMsg(idx int, seq uint64, tNs int64, pts ...[2]float64) *transport.Measurement {
	m := &transport.Measurement{V: 1, SensorIdx: idx, Seq: seq, TNs: tNs}
	for _, p := range pts {
		m.Dets = append(m.Dets, transport.Detection{Dim: 2, Z: [3]float64{p[0], p[1]}})
	}
	return m
}

func mustNew(t *testing.T, cfg *configs.Config) *Engine {
	t.Helper()
	e, err := New(cfg, Options{})
	if err != nil {
		t.Fatal(err)
	}
	return e
}

// TestBadInputChangesNothing: DESIGN.md "A message with any invalid part is
// rejected whole … A rejected message changes no track."
func TestBadInputChangesNothing(t *testing.T) {
	e := mustNew(t, baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2)))
	for k := int64(0); k < 10; k++ {
		if err := e.Ingest(xyMsg(0, uint64(k+1), t0+k*1e8, [2]float64{10 + 0.1*float64(k), 5}), t0+k*1e8); err != nil {
			t.Fatal(err)
		}
	}
	var before, after transport.TracksMsg
	e.Flush(&before)
	before = deepCopy(&before)
	tn := t0 + 10*1e8
	nan := xyMsg(0, 11, tn, [2]float64{1, 2}, [2]float64{math.NaN(), 0})
	dims := xyMsg(0, 11, tn, [2]float64{1, 2})
	dims.Dets[0].Dim = 3
	notPD := xyMsg(0, 11, tn, [2]float64{10, 5})
	notPD.Dets[0].HasR, notPD.Dets[0].R = true, [9]float64{1, 2, 2, 1}
	asym := xyMsg(0, 11, tn, [2]float64{10, 5})
	asym.Dets[0].HasR, asym.Dets[0].R = true, [9]float64{1, 0.1, 0, 1}
	infR := xyMsg(0, 11, tn, [2]float64{10, 5})
	infR.Dets[0].HasR, infR.Dets[0].R = true, [9]float64{math.Inf(1), 0, 0, 1}
	badIdx := xyMsg(7, 11, tn, [2]float64{10, 5})
	neg := xyMsg(-1, 11, tn)
	cases := []struct {
		m    *transport.Measurement
		want error
	}{{nan, ErrNonFinite}, {dims, ErrBadDims}, {notPD, ErrBadCov}, {asym, ErrBadCov}, {infR, ErrNonFinite},
		{badIdx, ErrBadSensor}, {neg, ErrBadSensor}}
	for i, c := range cases {
		if err := e.Ingest(c.m, tn); !errors.Is(err, c.want) {
			t.Errorf("case %d: got %v, want %v", i, err, c.want)
		}
	}
	e.Flush(&after)
	after.Seq = before.Seq
	if d := sameTracks(&before, &after); d != "" {
		t.Fatalf("rejected messages changed the tracks: %s", d)
	}
	if got := e.Counters().Rejected; got != uint64(len(cases)) {
		t.Errorf("rejected = %d, want %d", got, len(cases))
	}
	var h transport.HealthMsg
	e.Health(tn, &h)
	byReason := map[string]uint64{}
	for _, rc := range h.Counters.Rejected {
		byReason[rc.Reason] = rc.Count
	}
	if byReason["non_finite"] != 2 || byReason["bad_dims"] != 1 || byReason["bad_cov"] != 2 || byReason["unknown_sensor"] != 2 {
		t.Errorf("rejections by reason %v", byReason)
	}
	// A repeated message is refused too.
	if err := e.Ingest(xyMsg(0, 10, t0+9*1e8, [2]float64{10.9, 5}), tn); !errors.Is(err, ErrDuplicate) {
		t.Errorf("repeated message: %v", err)
	}
}

// TestMofNConfirmAndDelete: M = 3 of N = 5 (DESIGN.md tracker.confirm).
// Three hits in a row confirm on the third; a tentative track with one hit
// and then misses is deleted as soon as 3 hits within 5 have become
// impossible: after the third miss (1 + 5 − 4 = 2 < 3).
func TestMofNConfirmAndDelete(t *testing.T) {
	e := mustNew(t, baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2)))
	var out transport.TracksMsg
	step := func(k int64, pts ...[2]float64) {
		if err := e.Ingest(xyMsg(0, uint64(k+1), t0+k*1e8, pts...), t0+k*1e8); err != nil {
			t.Fatal(err)
		}
		e.Advance(t0+k*1e8, &out)
	}
	step(0, [2]float64{10, 5})
	step(1, [2]float64{10, 5})
	if len(out.Tracks) != 1 || out.Tracks[0].Status != "tentative" {
		t.Fatalf("after 2 hits: %+v", out.Tracks)
	}
	step(2, [2]float64{10, 5})
	if len(out.Tracks) != 1 || out.Tracks[0].Status != "confirmed" || out.Tracks[0].Hits != 3 {
		t.Fatalf("after 3 hits: %+v", out.Tracks)
	}

	e = mustNew(t, baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2)))
	step(0, [2]float64{10, 5})
	for k := int64(1); k <= 2; k++ {
		step(k)
		if len(out.Tracks) != 1 || out.Tracks[0].Misses != int(k) {
			t.Fatalf("after %d misses: %+v", k, out.Tracks)
		}
	}
	step(3)
	if len(out.Tracks) != 0 {
		t.Fatalf("tentative track survived 1 hit in 4: %+v", out.Tracks)
	}
}

// TestEmptyScansAreMisses: a confirmed track whose target vanishes coasts
// on empty scans and is deleted at the delete_misses-th (DESIGN.md "Empty
// scans are information (misses), not silence").
func TestEmptyScansAreMisses(t *testing.T) {
	cfg := baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2))
	e := mustNew(t, cfg)
	var out transport.TracksMsg
	k := int64(0)
	for ; k < 20; k++ {
		e.Ingest(xyMsg(0, uint64(k+1), t0+k*1e8, [2]float64{10 + 0.1*float64(k), 5}), t0+k*1e8)
		e.Advance(t0+k*1e8, &out)
	}
	if len(out.Tracks) != 1 || out.Tracks[0].Status != "confirmed" {
		t.Fatalf("no confirmed track: %+v", out.Tracks)
	}
	for miss := 1; miss <= cfg.Tracker.DeleteMisses; miss++ {
		e.Ingest(xyMsg(0, uint64(k+1), t0+k*1e8), t0+k*1e8)
		e.Advance(t0+k*1e8, &out)
		k++
		if miss < cfg.Tracker.DeleteMisses {
			if len(out.Tracks) != 1 || out.Tracks[0].Status != "coasting" || out.Tracks[0].Misses != miss {
				t.Fatalf("after %d empty scans: %+v", miss, out.Tracks)
			}
		} else if len(out.Tracks) != 0 {
			t.Fatalf("track alive after %d empty scans", miss)
		}
	}
}

// TestMissOnlyWhereVisible: a sensor looking east with a 90° field of view;
// the target walks out of it to the north. Outside the view no miss is
// counted and the track is not coasting; it is finally deleted when its
// position s.d. passes the bound (DESIGN.md "A miss counts only where the
// sensor could have seen the track").
func TestMissOnlyWhereVisible(t *testing.T) {
	sc := xySensor("mast_lidar", 0, 0, 0, 0.2)
	sc.FOVDeg = 90
	e := mustNew(t, baseConfig(sc))
	var out transport.TracksMsg
	outside := 0
	gone := false
	for k := int64(0); k < 3000; k++ {
		p := [2]float64{20, 10 + 0.1*float64(k)} // 1 m/s north; leaves the ±45° view at y = 20
		var pts [][2]float64
		if math.Abs(math.Atan2(p[1], p[0])) <= math.Pi/4 {
			pts = append(pts, p)
		} else {
			outside++
		}
		e.Ingest(xyMsg(0, uint64(k+1), t0+k*1e8, pts...), t0+k*1e8)
		e.Advance(t0+k*1e8, &out)
		if outside > 0 {
			if len(out.Tracks) == 0 {
				gone = true
				break
			}
			tr := out.Tracks[0]
			if tr.Misses != 0 || tr.Status != "confirmed" {
				// Only the first scan or two after leaving may still see the
				// prediction inside the view.
				if outside > 3 {
					t.Fatalf("%d scans outside the view: misses %d, status %s", outside, tr.Misses, tr.Status)
				}
			}
		}
	}
	if !gone || outside < 20 {
		t.Fatalf("track not deleted by the covariance bound (outside %d scans)", outside)
	}
}

// TestSensorsShareTracks: a target seen by a position sensor and a radar
// from another mount gets one track, updated by both, and the per-sensor
// NIS averages near the measurement dimension (E[χ²_m] = m, common
// practice for a consistent filter).
func TestSensorsShareTracks(t *testing.T) {
	a, b := xySensor("mast_lidar", 0, 0, 0, 0.2), rbrSensor("mast_radar", 5, -5, 45)
	s := &sim{r: rand.New(rand.NewPCG(3, 3)), accelSD: 0.3, sensors: []simSensor{{cfg: a}, {cfg: b, phaseNs: 20e6}},
		targets: []simTarget{{id: 1, x: [4]float64{30, 20, -1, 0.5}}}}
	msgs := s.run(t0 + 30e9)
	cfg := baseConfig(a, b)
	cfg.Tracker.AccelSD = 0.3
	e, outs := runAll(t, cfg, msgs)
	if c := e.Counters(); c.Births != 1 {
		t.Fatalf("%d births for one target seen by two sensors", c.Births)
	}
	last := outs[len(outs)-1]
	if len(last.Tracks) != 1 || last.Tracks[0].Hits < len(msgs)-5 {
		t.Fatalf("final tracks %+v", last.Tracks)
	}
	for i, st := range e.Sensors(nil) {
		m := float64([]int{2, 3}[i])
		if st.NISCount < 50 || math.Abs(st.MeanNIS-m) > 0.5*m {
			t.Errorf("%s: mean NIS %.2f over %d updates, want about %v", st.Name, st.MeanNIS, st.NISCount, m)
		}
	}
}

// TestClockOffsetEstimate: a sensor whose clock is 2.5 s behind and drifts
// by 50 ppm, with 5–40 ms of transport latency. The lower envelope of
// arrival − t_ns follows offset + least latency (5 ms) to within a
// millisecond or so, and tracking works on the estimated time base.
func TestClockOffsetEstimate(t *testing.T) {
	sc := xySensor("mast_lidar", 0, 0, 0, 0.2)
	cfg := baseConfig(sc)
	cfg.Timing.Clock = "estimate"
	e := mustNew(t, cfg)
	r := rand.New(rand.NewPCG(8, 8))
	var out transport.TracksMsg
	var trueOffset float64
	for k := int64(0); k < 600; k++ {
		tTrue := t0 + k*1e8
		trueOffset = 2.5e9 - 50e-6*float64(k*1e8) // sensor clock = true − offset
		sensorT := tTrue - int64(trueOffset)
		arrival := tTrue + int64(5e6+35e6*r.Float64())
		p := [2]float64{10 + 0.1*float64(k)*0.1 + 0.2*r.NormFloat64(), 5 + 0.2*r.NormFloat64()}
		if err := e.Ingest(xyMsg(0, uint64(k+1), sensorT, p), arrival); err != nil {
			t.Fatal(err)
		}
		e.Advance(arrival, &out)
	}
	est := e.Sensors(nil)[0].ClockOffsetNs
	want := trueOffset + 5e6
	if math.Abs(est-want) > 2e6 {
		t.Fatalf("clock offset estimate %.3f ms, want %.3f ms ± 2 ms", est/1e6, want/1e6)
	}
	if len(out.Tracks) != 1 || out.Tracks[0].Status != "confirmed" {
		t.Fatalf("tracks on the estimated time base: %+v", out.Tracks)
	}
}

// movingScene is a yard tractor driving east at 4 m/s and turning gently,
// with odometry (z = [v, yaw_rate]) at 50 Hz and GNSS fixes at 5 Hz made
// about the site origin with WGS 84 (filters/geo), and a lidar on its nose
// that sees a parked cart at site (60, 12). It returns the configuration,
// the messages in time order and the true final pose.
func movingScene(t interface{ Fatal(...any) }, seed uint64, seconds int) (*configs.Config, []transport.Measurement, [3]float64) {
	site := configs.Site{Lat: 10.5, Lon: -20.25, Alt: 30}
	loc, err := geo.NewLocal(site.Lat, site.Lon, site.Alt)
	if err != nil {
		t.Fatal(err)
	}
	odo := configs.Sensor{Name: "wheel_odometry", Kind: "odometry", NoiseSD: []float64{0.05, 0.01}, PeriodMS: 20}
	gnss := configs.Sensor{Name: "roof_gnss", Kind: "gnss", Mount: configs.Pose{X: 0.5}, NoiseSD: []float64{0.5, 0.5}, PeriodMS: 200}
	lidar := xySensor("nose_lidar", 2, 0, 0, 0.1)
	lidar.FOVDeg, lidar.MaxRange = 180, 100
	cfg := baseConfig(odo, gnss, lidar)
	cfg.Site = site
	cfg.Platform = configs.Platform{Motion: "moving", Pose: configs.Pose{X: 1, Y: -1, YawDeg: 5}}
	r := rand.New(rand.NewPCG(seed, 6))
	cart := [2]float64{60, 12}
	var msgs []transport.Measurement
	var px, py, yaw float64
	const v, w = 4.0, 0.01
	seq := [3]uint64{}
	for k := int64(1); k <= int64(seconds)*100; k++ { // 10 ms steps
		tn := t0 + k*1e7
		dt := 0.01
		px += v * math.Cos(yaw+w*dt/2) * dt
		py += v * math.Sin(yaw+w*dt/2) * dt
		yaw += w * dt
		switch {
		case k%20 == 0:
			ax, ay := px+0.5*math.Cos(yaw), py+0.5*math.Sin(yaw)
			lat, lon, _ := loc.ENUToGeodetic(ax+0.5*r.NormFloat64(), ay+0.5*r.NormFloat64(), site.Alt)
			seq[1]++
			msgs = append(msgs, transport.Measurement{V: 1, SensorIdx: 1, Seq: seq[1], TNs: tn, Dets: []transport.Detection{{Dim: 2, Z: [3]float64{lat, lon}}}})
		case k%10 == 0:
			c, s := math.Cos(yaw), math.Sin(yaw)
			sx, sy := px+2*c, py+2*s
			dx, dy := cart[0]-sx, cart[1]-sy
			seq[2]++
			msgs = append(msgs, *xyMsg(2, seq[2], tn, [2]float64{c*dx + s*dy + 0.1*r.NormFloat64(), -s*dx + c*dy + 0.1*r.NormFloat64()}))
		case k%2 == 0:
			seq[0]++
			msgs = append(msgs, transport.Measurement{V: 1, SensorIdx: 0, Seq: seq[0], TNs: tn,
				Dets: []transport.Detection{{Dim: 2, Z: [3]float64{v + 0.05*r.NormFloat64(), w + 0.01*r.NormFloat64()}}}})
		}
	}
	return cfg, msgs, [3]float64{px, py, yaw}
}

// TestMovingPlatform: the ego estimate must follow the true pose, and the
// cart's single track must stay where the cart is, at rest, although every
// detection is placed in the site frame through the estimated ego pose.
func TestMovingPlatform(t *testing.T) {
	cfg, msgs, truth := movingScene(t, 6, 10)
	e := mustNew(t, cfg)
	var out transport.TracksMsg
	cart := [2]float64{60, 12}
	for i := range msgs {
		if err := e.Ingest(&msgs[i], msgs[i].TNs); err != nil {
			t.Fatal(err)
		}
		e.Advance(msgs[i].TNs, &out)
	}
	if out.Ego == nil || math.Hypot(out.Ego.Pos[0]-truth[0], out.Ego.Pos[1]-truth[1]) > 1.0 || math.Abs(wrapAngle(out.Ego.Yaw-truth[2])) > 0.05 {
		t.Fatalf("ego %+v, truth %v", out.Ego, truth)
	}
	if len(out.Tracks) != 1 || e.Counters().Births != 1 {
		t.Fatalf("%d births, tracks %+v", e.Counters().Births, out.Tracks)
	}
	tr := out.Tracks[0]
	if d := math.Hypot(tr.Pos[0]-cart[0], tr.Pos[1]-cart[1]); d > 1 || math.Hypot(tr.Vel[0], tr.Vel[1]) > 0.5 {
		t.Fatalf("cart track at (%.2f, %.2f) moving (%.2f, %.2f), cart at %v", tr.Pos[0], tr.Pos[1], tr.Vel[0], tr.Vel[1], cart)
	}
}

// TestOutputRate: at output.rate_hz 10 a message comes out on each 100 ms
// grid point however often Advance is called, with every track predicted to
// the stamp.
func TestOutputRate(t *testing.T) {
	cfg := baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2))
	cfg.Output.RateHz = 10
	e := mustNew(t, cfg)
	var out transport.TracksMsg
	var stamps []int64
	for k := int64(0); k < 30; k++ {
		e.Ingest(xyMsg(0, uint64(k+1), t0+k*1e8+3e7, [2]float64{10 + 0.2*float64(k), 5}), t0+k*1e8+3e7)
		for ms := int64(0); ms < 100; ms += 7 {
			tn := t0 + k*1e8 + 3e7 + ms*1e6
			if e.Advance(tn, &out) {
				stamps = append(stamps, out.TNs)
			}
		}
	}
	for i := 1; i < len(stamps); i++ {
		if d := stamps[i] - stamps[i-1]; d < 95e6 || d > 105e6 {
			t.Fatalf("stamps %d and %d are %d ns apart", i-1, i, d)
		}
	}
	if len(stamps) < 28 {
		t.Fatalf("%d messages in 3 s at 10 Hz", len(stamps))
	}
	// The last message's track is predicted past its last update.
	tr := out.Tracks[0]
	if !(out.TNs > tr.UpdatedNs) {
		t.Fatalf("stamp %d not after the last update %d", out.TNs, tr.UpdatedNs)
	}
	dt := float64(out.TNs-tr.UpdatedNs) * 1e-9
	wantX := 10 + 0.2*29 + 2*dt // 2 m/s east
	if math.Abs(tr.Pos[0]-wantX) > 0.1 {
		t.Fatalf("track x %.3f at the stamp, want about %.3f", tr.Pos[0], wantX)
	}
}

// TestHealthCounts: sequence gaps count as lost, reported rejections by
// sensor, and alerts for lost and late messages.
func TestHealthCounts(t *testing.T) {
	e := mustNew(t, baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2), xySensor("mast_lidar_2", 0, 0, 0, 0.2)))
	for _, seq := range []uint64{1, 2, 5, 6, 9} { // 3, 4, 7, 8 missing
		tn := t0 + int64(seq)*1e8
		e.Ingest(xyMsg(0, seq, tn, [2]float64{10, 5}), tn)
	}
	e.Reject(1, "bad_json")
	e.Ingest(xyMsg(0, 10, t0, [2]float64{10, 5}), t0+1e9) // 900 ms late, window 300 ms
	var h transport.HealthMsg
	// 3 and 4 (skipped at 500 ms) are lost from 800 ms; 7 and 8 (skipped at
	// 900 ms) only from 1200 ms: until then they may still come.
	e.Health(t0+1e9+5e7, &h)
	if got := h.Sensors[0].Lost; got != 2 {
		t.Fatalf("lost %d at 1050 ms, want 2", got)
	}
	e.Health(t0+1.2e9, &h)
	s0, s1 := h.Sensors[0], h.Sensors[1]
	if s0.Lost != 4 || s0.LateDropped != 1 || s1.Rejected != 1 || s0.Rejected != 0 {
		t.Fatalf("sensor health %+v %+v", s0, s1)
	}
	if math.Abs(s0.AgeMS-200) > 1e-9 {
		t.Errorf("age %v ms, want 200", s0.AgeMS)
	}
	codes := map[string]bool{}
	for _, a := range h.Alerts {
		codes[a.Code+"/"+a.Sensor] = true
	}
	if !codes["messages_lost/mast_lidar"] || !codes["late_dropped/mast_lidar"] || h.Counters.LateDropped != 1 {
		t.Fatalf("alerts %+v counters %+v", h.Alerts, h.Counters)
	}
}

// TestSkippedSeqsAtTheEdges: a jump of 2⁴⁰ sequence numbers is counted in
// bounded work and space, and numbers still missing when the input ends
// (Flush) count as lost at once.
func TestSkippedSeqsAtTheEdges(t *testing.T) {
	e := mustNew(t, baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2)))
	e.Ingest(xyMsg(0, 1, t0, [2]float64{10, 5}), t0)
	e.Ingest(xyMsg(0, 1<<40, t0+1e8, [2]float64{10, 5}), t0+1e8)
	var h transport.HealthMsg
	e.Health(t0+1e8+1, &h)
	if got, want := h.Sensors[0].Lost, uint64(1<<40-2-maxPendingSeqs); got != want {
		t.Errorf("lost %d right after the jump, want %d (all but the newest %d held open)", got, want, maxPendingSeqs)
	}
	e.Health(t0+5e8, &h)
	if got, want := h.Sensors[0].Lost, uint64(1<<40-2); got != want {
		t.Errorf("lost %d after lag_ms, want %d", got, want)
	}

	e = mustNew(t, baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2)))
	e.Ingest(xyMsg(0, 1, t0, [2]float64{10, 5}), t0)
	e.Ingest(xyMsg(0, 4, t0+1e8, [2]float64{10, 5}), t0+1e8)
	var out transport.TracksMsg
	e.FlushAt(t0+1e8, &out)
	e.Health(t0+1e8, &h)
	if got := h.Sensors[0].Lost; got != 2 {
		t.Errorf("lost %d after the end of input, want 2", got)
	}
}

// TestPinholeCamera: a camera alone (image column plus a detector range
// whose s.d. grows with range) tracks a cart walking across its view; the
// track must sit on the truth and the mean NIS near m = 2 (E[χ²₂] = 2,
// common practice for a consistent filter).
func TestPinholeCamera(t *testing.T) {
	cam := configs.Sensor{Name: "front_camera", Kind: "pinhole", Mount: configs.Pose{X: 0, Y: 0, YawDeg: 90},
		NoiseSD: []float64{2, 0.3}, PeriodMS: 66, MaxRange: 60, FOVDeg: 90, PDetect: 1, FX: 800, CX: 640, RangeSDFrac: 0.03}
	s := &sim{r: rand.New(rand.NewPCG(12, 12)), accelSD: 0.2, sensors: []simSensor{{cfg: cam}},
		targets: []simTarget{{id: 1, x: [4]float64{-8, 25, 0.8, 0}}}}
	msgs := s.run(t0 + 20e9)
	cfg := baseConfig(cam)
	cfg.Tracker.Motion, cfg.Tracker.Filter, cfg.Tracker.AccelSD = "ctrv", "srukf", 0.3
	e, outs := runAll(t, cfg, msgs)
	last, truth := outs[len(outs)-1], msgs[len(msgs)-1].truth
	if len(last.Tracks) != 1 || e.Counters().Births != 1 {
		t.Fatalf("%d births, tracks %+v", e.Counters().Births, last.Tracks)
	}
	tr := last.Tracks[0]
	if d := math.Hypot(tr.Pos[0]-truth.pos[0][0], tr.Pos[1]-truth.pos[0][1]); d > 1 {
		t.Fatalf("track at %v, truth %v (%.2f m off)", tr.Pos, truth.pos[0], d)
	}
	st := e.Sensors(nil)[0]
	if math.Abs(st.MeanNIS-2) > 1 {
		t.Fatalf("mean NIS %.2f over %d updates, want about 2", st.MeanNIS, st.NISCount)
	}
}
