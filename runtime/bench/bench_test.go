package bench

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/filters"
	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
)

// The baselines must be right for the ratios to mean anything: the
// covariance-form filters and the square-root ones are algebraically the
// same estimator (Kalman 1960 for the linear case; van der Merwe & Wan
// 2001 show the SR-UKF equals the UKF), so on the same input their means
// agree to rounding.
func TestBaselinesAgreeWithSquareRootFilters(t *testing.T) {
	cv, err := cvProblem()
	if err != nil {
		t.Fatal(err)
	}
	ct, err := ctrvProblem()
	if err != nil {
		t.Fatal(err)
	}
	srkf, _ := filters.NewSRKF(cv.f)
	srukf, _ := filters.NewSRUKF(ct.f, filters.DefaultUTParams())
	kf := &plainKF{p: &cv}
	ukf := &plainUKF{p: &ct, ut: filters.DefaultUTParams()}
	for _, c := range []struct {
		name string
		sr   *sqrtStepper
		base stepper
		mean func() []float64
		p    *filterProblem
		tol  float64
	}{
		{"KF", &sqrtStepper{srkf, &cv}, kf, func() []float64 { return kf.x.RawVector().Data }, &cv, 1e-9},
		{"UKF", &sqrtStepper{srukf, &ct}, ukf, func() []float64 { return ukf.x }, &ct, 1e-7},
	} {
		if err := c.sr.reset(); err != nil {
			t.Fatal(err)
		}
		if err := c.base.reset(); err != nil {
			t.Fatal(err)
		}
		for k := 0; k < 300; k++ {
			if err := c.sr.step(c.p.zs[k]); err != nil {
				t.Fatal(err)
			}
			if err := c.base.step(c.p.zs[k]); err != nil {
				t.Fatal(err)
			}
		}
		got, want := c.sr.kf.State().X, c.mean()
		for i := range want {
			if d := math.Abs(got[i] - want[i]); d > c.tol*(1+math.Abs(want[i])) {
				t.Errorf("%s: x[%d] square-root %.12g, baseline %.12g", c.name, i, got[i], want[i])
			}
		}
	}
}

var sink []byte

// Measure reads allocations from runtime.MemStats: an operation that makes
// one escaping slice allocates exactly one heap object (Go runtime, common
// practice), and one that makes none allocates none.
func TestMeasureCountsAllocations(t *testing.T) {
	one, err := Measure(20*time.Millisecond, func(int) error { sink = make([]byte, 64); return nil })
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(one.AllocsPerOp-1) > 0.01 {
		t.Errorf("one allocation per op measured as %g", one.AllocsPerOp)
	}
	x := 0
	none, err := Measure(20*time.Millisecond, func(i int) error { x += i; return nil })
	if err != nil {
		t.Fatal(err)
	}
	if none.AllocsPerOp > 0.01 {
		t.Errorf("no allocation per op measured as %g", none.AllocsPerOp)
	}
	if one.N < 100 || one.NsPerOp <= 0 {
		t.Errorf("implausible loop: %+v", one)
	}
}

// The square-root filters allocate nothing per step (DESIGN.md: the hot
// path is allocation-free); the plain gonum baselines do, as such code does.
func TestFilterRows(t *testing.T) {
	rows, err := FilterRows(20 * time.Millisecond)
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 3 {
		t.Fatalf("%d filter rows, want 3", len(rows))
	}
	for _, r := range rows {
		a, _ := r.Get("allocs/op")
		b, _ := r.Get("base allocs/op")
		ns, _ := r.Get("ns/op")
		base, _ := r.Get("base ns/op")
		ratio, _ := r.Get("ratio")
		if a > 0.05 {
			t.Errorf("%s: %g allocs/op", r.Name, a)
		}
		if b < 1 {
			t.Errorf("%s: baseline %g allocs/op, expected the plain code to allocate", r.Name, b)
		}
		if math.Abs(ratio-ns/base) > 1e-9*ratio {
			t.Errorf("%s: ratio %g is not %g/%g", r.Name, ratio, ns, base)
		}
	}
}

// Nearest-rank percentiles (the smallest value with at least p of the
// sample at or below it; from memory, the usual definition): of 1..100 the
// median is 50 and the 99th percentile 99.
func TestQuantilesNearestRank(t *testing.T) {
	var r receiver
	for i := 100; i >= 1; i-- {
		r.lat = append(r.lat, float64(i))
	}
	p50, p99 := r.quantiles()
	if p50 != 50 || p99 != 99 {
		t.Errorf("p50 %g p99 %g, want 50 and 99", p50, p99)
	}
}

// Poisson(λ) has mean and variance λ (textbook); Knuth's method must give
// both within 5 standard errors.
func TestPoissonMoments(t *testing.T) {
	const lambda, n = 4.0, 200000
	rng := rand.New(rand.NewPCG(5, 6))
	var s, s2 float64
	for i := 0; i < n; i++ {
		k := float64(poisson(rng, lambda))
		s += k
		s2 += k * k
	}
	mean := s / n
	v := s2/n - mean*mean
	if math.Abs(mean-lambda) > 5*math.Sqrt(lambda/n) {
		t.Errorf("mean %g, want %g", mean, lambda)
	}
	// Var of the sample variance of a Poisson is about (λ + 2λ²)/n.
	if math.Abs(v-lambda) > 5*math.Sqrt((lambda+2*lambda*lambda)/n) {
		t.Errorf("variance %g, want %g", v, lambda)
	}
}

// A generated scene is a pure function of its seed, every message decodes,
// and the detection count matches its expectation: per scan Binomial(N, pd)
// target detections plus Poisson(c) clutter, within 5 standard deviations.
func TestGenerate(t *testing.T) {
	s := Scene{Targets: 30, Clutter: 3, Seconds: 20, Seed: 9}
	a, err := Generate(s)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := Generate(s)
	if len(a) != len(b) {
		t.Fatal("two runs differ in length")
	}
	dec, err := transport.NewDecoder([]transport.SensorSpec{{Name: LidarName, Dim: 2}, {Name: RadarName, Dim: 3}}, transport.Limits{MaxPayloadBytes: 1 << 20})
	if err != nil {
		t.Fatal(err)
	}
	var mean, variance float64
	var m transport.Measurement
	for i := range a {
		if !bytes.Equal(a[i].Payload, b[i].Payload) || a[i].RxNs != b[i].RxNs {
			t.Fatalf("message %d differs between two runs of the same seed", i)
		}
		if i > 0 && a[i].RxNs < a[i-1].RxNs {
			t.Fatalf("message %d arrives before message %d", i, i-1)
		}
		if err := dec.Decode(a[i].Payload, a[i].RxNs, &m); err != nil {
			t.Fatalf("message %d: %v", i, err)
		}
		pd := 0.95
		if a[i].Topic == RadarTopic {
			pd = 0.9
		}
		mean += float64(s.Targets)*pd + s.Clutter
		variance += float64(s.Targets)*pd*(1-pd) + s.Clutter
	}
	// 10 + 20 scans a second over 20 s, counting the scan at t = 0 of the lidar.
	if len(a) < 598 || len(a) > 602 {
		t.Errorf("%d messages, want about 600", len(a))
	}
	if got := float64(Detections(a)); math.Abs(got-mean) > 5*math.Sqrt(variance) {
		t.Errorf("%g detections, expected %.0f ± %.0f", got, mean, math.Sqrt(variance))
	}
}

func TestReportJSONRoundTrip(t *testing.T) {
	rep := Report{GoVersion: "go", OS: "linux", Arch: "amd64", CPUs: 2,
		Rows: []Row{{Section: "engine", Name: "x", Figures: []Figure{{Key: "dets/s", Value: 1234.5}}}}}
	var buf bytes.Buffer
	if err := rep.WriteJSON(&buf); err != nil {
		t.Fatal(err)
	}
	var back Report
	if err := json.Unmarshal(buf.Bytes(), &back); err != nil {
		t.Fatal(err)
	}
	if v, ok := back.Rows[0].Get("dets/s"); !ok || v != 1234.5 {
		t.Errorf("round trip lost the figure: %+v", back)
	}
	buf.Reset()
	if err := rep.WriteTable(&buf); err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(buf.Bytes(), []byte("dets/s 1234")) {
		t.Errorf("table misses the figure:\n%s", buf.String())
	}
}

// The godwit MQTT row's work per sensor message, without the network: a
// 5-detection lidar scan every 0.5 ms decoded, tracked and (rate_hz 0)
// encoded as a tracks message, as the daemon's engine goroutine does it.
func BenchmarkMQTTRowScan(b *testing.B) {
	cfg, err := Config(ConfigParams{RateHz: 0, LidarMS: 0.5})
	if err != nil {
		b.Fatal(err)
	}
	p, err := daemon.NewPipeline(cfg, engine.Options{}, nil)
	if err != nil {
		b.Fatal(err)
	}
	sp := newScanPayload(5)
	t := int64(1_700_000_000_000_000_000)
	step := func() {
		t += 500_000
		sp.m.Seq++
		sp.m.TNs = t
		sp.buf, _ = transport.AppendMeasurement(sp.buf[:0], &sp.m)
		if err := p.Handle(LidarTopic, sp.buf, t+100_000); err != nil {
			b.Fatal(err)
		}
		p.Advance(t + 100_000)
	}
	for i := 0; i < 2000; i++ {
		step()
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		step()
	}
}

// Prometheus text exposition format (the format's documentation, from
// memory): "name{labels} value", comments start with #.
func TestSampleLine(t *testing.T) {
	for _, c := range []struct {
		line string
		name string
		v    float64
		ok   bool
	}{
		{`godwit_queue_dropped_total 12`, "godwit_queue_dropped_total", 12, true},
		{`godwit_measurements_received_total{sensor="lidar"} 3.5e+06`, "godwit_measurements_received_total", 3.5e6, true},
		{`# TYPE godwit_queue_dropped_total counter`, "", 0, false},
		{``, "", 0, false},
		{`broken`, "", 0, false},
	} {
		name, v, ok := sampleLine(c.line)
		if name != c.name || v != c.v || ok != c.ok {
			t.Errorf("%q: %q %g %v, want %q %g %v", c.line, name, v, ok, c.name, c.v, c.ok)
		}
	}
}

// A tracks message stamped t reflects every sensor message sent at or
// before t that no earlier message reflected; each gets its own latency.
func TestReceiverReflects(t *testing.T) {
	var r receiver
	r.reset(true)
	for _, ts := range []int64{100, 200, 300, 400} {
		r.sending(ts)
	}
	msg := func(t int64) []byte { return []byte(fmt.Sprintf(`{"t_ns":%d}`, t)) }
	r.record(msg(300), 1000) // reflects 100, 200, 300
	r.record(msg(300), 1100) // a repeat reflects nothing new
	r.record(msg(400), 1200)
	if got := r.reflected(); got != 4 {
		t.Fatalf("reflected %d, want 4", got)
	}
	want := []float64{900e-6, 800e-6, 700e-6, 800e-6} // ms
	if len(r.lat) != len(want) {
		t.Fatalf("latencies %v, want %v", r.lat, want)
	}
	for i := range want {
		if math.Abs(r.lat[i]-want[i]) > 1e-12 {
			t.Errorf("latency %d: %g ms, want %g", i, r.lat[i], want[i])
		}
	}
}

// The sustained-rate search brackets the limit by doubling and then
// bisects four times: the answer is at most the limit and within 1/16 of
// the bracket below it, and one failed trial alone (a stall) does not end
// the search.
func TestSustainedRateSearch(t *testing.T) {
	const limit = 30000.0
	stalled := false
	rate, trials, err := sustainedRate(func(r float64) (trialResult, error) {
		if r == 8000 && !stalled {
			stalled = true // one stall at 8000 msg/s
			return trialResult{}, nil
		}
		return trialResult{kept: r <= limit}, nil
	})
	if err != nil {
		t.Fatal(err)
	}
	// Doubling: 4k, 8k (stall, retried), 16k, 32k (fails twice): 6
	// trials; bisecting 16k..32k: 24k, 28k, 30k pass, 31k fails twice: 5.
	if rate > limit || rate < limit-1000 {
		t.Errorf("sustained %g, want within 1000 below %g", rate, limit)
	}
	if trials != 11 {
		t.Errorf("%d trials, want 11", trials)
	}
}
