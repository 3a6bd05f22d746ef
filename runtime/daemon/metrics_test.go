package daemon

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/filters/geo"
	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/broker"
	"github.com/godwit-fusion/godwit/transport/mqtt"
	"github.com/prometheus/client_golang/prometheus/testutil/promlint"
	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
	"go.uber.org/goleak"
)

// httpGet fetches url without keeping the connection (an idle keep-alive
// connection would outlive the test and trip goleak).
func httpGet(t *testing.T, url string) (int, []byte) {
	t.Helper()
	c := &http.Client{Timeout: 5 * time.Second, Transport: &http.Transport{DisableKeepAlives: true}}
	resp, err := c.Get(url)
	if err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
	return resp.StatusCode, b
}

// scrape parses /metrics with Prometheus's own text-format parser.
func scrape(t *testing.T, addr string) (map[string]*dto.MetricFamily, []byte) {
	t.Helper()
	code, body := httpGet(t, "http://"+addr+"/metrics")
	if code != http.StatusOK {
		t.Fatalf("/metrics: status %d\n%s", code, body)
	}
	p := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := p.TextToMetricFamilies(bytes.NewReader(body))
	if err != nil {
		t.Fatalf("/metrics is not the Prometheus text format: %v", err)
	}
	return fams, body
}

// value is the sample of family name whose labels include all of want
// (pairs name, value); ok false when there is none.
func value(fams map[string]*dto.MetricFamily, name string, want ...string) (float64, bool) {
	f := fams[name]
	if f == nil {
		return 0, false
	}
next:
	for _, m := range f.GetMetric() {
		for i := 0; i+1 < len(want); i += 2 {
			found := false
			for _, l := range m.GetLabel() {
				if l.GetName() == want[i] && l.GetValue() == want[i+1] {
					found = true
				}
			}
			if !found {
				continue next
			}
		}
		switch {
		case m.Counter != nil:
			return m.Counter.GetValue(), true
		case m.Gauge != nil:
			return m.Gauge.GetValue(), true
		case m.Histogram != nil:
			return float64(m.Histogram.GetSampleCount()), true
		}
	}
	return 0, false
}

func waitFor(timeout time.Duration, ok func() bool) bool {
	deadline := time.Now().Add(timeout)
	for !ok() {
		if time.Now().After(deadline) {
			return false
		}
		time.Sleep(10 * time.Millisecond)
	}
	return true
}

// startDaemon runs d until the returned stop is called.
func startDaemon(t *testing.T, d *Daemon) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	stopped := false
	return func() {
		if stopped {
			return
		}
		stopped = true
		cancel()
		if err := <-done; err != nil {
			t.Errorf("Run: %v", err)
		}
	}
}

func TestMetricsOverBroker(t *testing.T) {
	for name, url := range brokers(t) {
		t.Run(name, func(t *testing.T) {
			defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
			if url == "" {
				b, err := broker.Start(broker.Config{})
				if err != nil {
					t.Fatal(err)
				}
				defer b.Close()
				url = b.URL()
			}
			metricsRoundTrip(t, url)
		})
	}
}

// metricsRoundTrip sends a known mix of measurements through a real daemon
// and checks that the scrape counts exactly what was sent and refused.
func metricsRoundTrip(t *testing.T, url string) {
	cfg := liveConfig(t, url)
	d, err := New(Options{Config: cfg, HealthPeriod: 100 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	stop := startDaemon(t, d)
	defer stop()
	if !waitFor(5*time.Second, func() bool { return d.MetricsAddr() != "" && d.notReady() == "" }) {
		t.Fatalf("not ready within 5 s: addr %q, %s", d.MetricsAddr(), d.notReady())
	}
	addr := d.MetricsAddr()
	pub := newPeer(t, url, cfg.Broker.ClientID+"-sensors")
	defer pub.close()
	watch := newPeer(t, url, cfg.Broker.ClientID+"-watch")
	defer watch.close()
	watch.sub(cfg.Output.HealthTopic)
	defer func() { // leave no retained messages on a shared broker
		watch.pub(cfg.Output.StatusTopic, nil, true)
		watch.pub(cfg.Output.HealthTopic, nil, true)
	}()

	radar, lidar := cfg.Sensors[0], cfg.Sensors[1]
	if radar.Kind != configs.KindRangeBearingRate || lidar.Kind != configs.KindPositionXY {
		t.Fatalf("dock-post sensors changed: %s %s", radar.Kind, lidar.Kind)
	}
	scene := gatesim.NewScene(cfg, time.Now().UnixNano(), 3)
	// 20 radar scans with seq 1..20 except 8 and 9 (a gap of 2), then one
	// 1 s in the past (older than the 200 ms lag window of dock-post.yaml);
	// 10 lidar scans.
	sent := map[string]int{radar.Name: 0, lidar.Name: 0}
	var seq uint64
	for i := 0; i < 20; i++ {
		seq++
		if seq == 8 {
			seq = 10
		}
		pub.pub(radar.Topic, scene.Payload(0, seq, time.Now().UnixNano()), false)
		sent[radar.Name]++
		if i%2 == 0 {
			pub.pub(lidar.Topic, scene.Payload(1, uint64(i/2+1), time.Now().UnixNano()), false)
			sent[lidar.Name]++
		}
		time.Sleep(5 * time.Millisecond)
	}
	seq++
	pub.pub(radar.Topic, scene.Payload(0, seq, time.Now().Add(-time.Second).UnixNano()), false)
	sent[radar.Name]++
	// The refusals, each the first of its reason (DESIGN.md v1 reasons).
	now := time.Now().UnixNano()
	bad := []struct {
		topic, reason string
		payload       string
	}{
		{radar.Topic, "bad_json", `{"v":1,"sensor":`},
		{radar.Topic, "bad_json", `not json`},
		{radar.Topic, "bad_version", fmt.Sprintf(`{"v":2,"sensor":"%s","seq":90,"t_ns":%d,"dets":[]}`, radar.Name, now)},
		{lidar.Topic, "bad_dims", fmt.Sprintf(`{"v":1,"sensor":"%s","seq":90,"t_ns":%d,"dets":[{"z":[1,2,3]}]}`, lidar.Name, now)},
		{lidar.Topic, "unknown_sensor", fmt.Sprintf(`{"v":1,"sensor":"gate_sonar","seq":1,"t_ns":%d,"dets":[]}`, now)},
	}
	for _, b := range bad {
		pub.pub(b.topic, []byte(b.payload), false)
	}
	sent[radar.Name] += 3
	sent[lidar.Name] += 2
	total := uint64(sent[radar.Name] + sent[lidar.Name])
	if !waitFor(5*time.Second, func() bool { return d.Stats().Pipeline.Messages >= total }) {
		t.Fatalf("daemon saw %d of %d messages", d.Stats().Pipeline.Messages, total)
	}
	// Let one tracks message and one health evaluation follow (rate_hz 10,
	// health every 100 ms here).
	time.Sleep(300 * time.Millisecond)

	fams, body := scrape(t, addr)
	t.Logf("scraped %d bytes, %d families", len(body), len(fams))
	check := func(what string, got float64, ok bool, want float64) {
		t.Helper()
		if !ok {
			t.Errorf("%s: absent from /metrics", what)
		} else if got != want {
			t.Errorf("%s = %v, want %v", what, got, want)
		}
	}
	// Counts equal what the test sent: received by sensor includes the
	// refused ones on that sensor's topic.
	for name, n := range sent {
		v, ok := value(fams, "godwit_measurements_received_total", "sensor", name)
		check("received{"+name+"}", v, ok, float64(n))
	}
	for reason, want := range map[string]float64{"bad_json": 2, "bad_version": 1} {
		v, ok := value(fams, "godwit_measurements_rejected_total", "sensor", radar.Name, "reason", reason)
		check("rejected{radar,"+reason+"}", v, ok, want)
	}
	for reason, want := range map[string]float64{"bad_dims": 1, "unknown_sensor": 1, "bad_json": 0} {
		v, ok := value(fams, "godwit_measurements_rejected_total", "sensor", lidar.Name, "reason", reason)
		check("rejected{lidar,"+reason+"}", v, ok, want)
	}
	v, ok := value(fams, "godwit_measurements_lost_total", "sensor", radar.Name)
	check("lost{radar}", v, ok, 2)
	v, ok = value(fams, "godwit_measurements_lost_total", "sensor", lidar.Name)
	check("lost{lidar}", v, ok, 0)
	v, ok = value(fams, "godwit_measurements_late_dropped_total", "sensor", radar.Name)
	check("late_dropped{radar}", v, ok, 1)
	v, ok = value(fams, "godwit_queue_capacity")
	check("queue_capacity", v, ok, float64(cfg.Limits.QueueLength))
	if v, ok := value(fams, "godwit_queue_depth"); !ok || v < 0 || v > float64(cfg.Limits.QueueLength) {
		t.Errorf("queue_depth %v (present %v), want a gauge in [0, %d]", v, ok, cfg.Limits.QueueLength)
	}
	v, ok = value(fams, "godwit_queue_dropped_total")
	check("queue_dropped", v, ok, 0)
	v, ok = value(fams, "godwit_broker_connected")
	check("broker_connected", v, ok, 1)
	v, ok = value(fams, "godwit_vehicle_info", "vehicle", cfg.Vehicle)
	check("vehicle_info", v, ok, 1)
	// An enum gauge: exactly one state is 1.
	var states float64
	for _, s := range healthStates {
		v, ok := value(fams, "godwit_health_state", "state", s)
		if !ok {
			t.Errorf("health_state{%s} absent", s)
		}
		states += v
	}
	if states != 1 {
		t.Errorf("health_state values sum to %v, want exactly one state at 1", states)
	}
	if v, ok := value(fams, "godwit_published_messages_total", "kind", "tracks"); !ok || v < 1 {
		t.Errorf("published{tracks} = %v (present %v), want ≥ 1", v, ok)
	}
	if v, ok := value(fams, "godwit_published_messages_total", "kind", "health"); !ok || v < 1 {
		t.Errorf("published{health} = %v (present %v), want ≥ 1", v, ok)
	}
	for _, name := range []string{"godwit_ingest_to_publish_latency_seconds", "godwit_engine_step_duration_seconds"} {
		f := fams[name]
		if f == nil || f.GetType() != dto.MetricType_HISTOGRAM {
			t.Errorf("%s: no histogram", name)
			continue
		}
		for _, m := range f.GetMetric() {
			checkHistogram(t, name, m.Histogram)
		}
	}
	// Every accepted message went through the ingest step.
	accepted := float64(sent[radar.Name] + sent[lidar.Name] - len(bad))
	if v, ok := value(fams, "godwit_engine_step_duration_seconds", "step", "ingest"); !ok || v != float64(total) {
		t.Errorf("ingest steps observed %v, want %d (every message on a sensor topic)", v, total)
	}
	if v, ok := value(fams, "godwit_ingest_to_publish_latency_seconds"); !ok || v < 1 || v > accepted {
		t.Errorf("latency observations %v, want 1..%v (accepted messages already published)", v, accepted)
	}

	// Naming practice, by Prometheus's own linter: on the exposition as
	// served, and on the registry.
	problems, err := promlint.New(bytes.NewReader(body)).Lint()
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		t.Errorf("promlint (scrape): %s: %s", p.Metric, p.Text)
	}
	mfs, err := d.Registry().Gather()
	if err != nil {
		t.Fatal(err)
	}
	problems, err = promlint.NewWithMetricFamilies(mfs).Lint()
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		t.Errorf("promlint (registry): %s: %s", p.Metric, p.Text)
	}

	// After the stop the registry still answers: counters match Stats.
	stop()
	if d.MetricsAddr() != "" {
		t.Errorf("MetricsAddr %q after Run returned", d.MetricsAddr())
	}
	st := d.Stats()
	mfs, err = d.Registry().Gather()
	if err != nil {
		t.Fatal(err)
	}
	byName := make(map[string]*dto.MetricFamily)
	for _, f := range mfs {
		byName[f.GetName()] = f
	}
	if n := len(byName["godwit_published_messages_total"].GetMetric()); n != 2 {
		t.Errorf("published_messages_total: %d series, want tracks and health", n)
	}
	tr, _ := value(byName, "godwit_published_messages_total", "kind", "tracks")
	he, _ := value(byName, "godwit_published_messages_total", "kind", "health")
	if uint64(tr+he) != st.Published {
		t.Errorf("published tracks %v + health %v ≠ Stats.Published %d", tr, he, st.Published)
	}
	var rejected float64
	for _, m := range byName["godwit_measurements_rejected_total"].GetMetric() {
		rejected += m.Counter.GetValue()
	}
	var decoder uint64
	for _, c := range st.Pipeline.Rejected {
		decoder += c
	}
	if rejected != float64(decoder+st.Pipeline.Refused) || rejected != float64(len(bad)) {
		t.Errorf("rejected series sum %v, pipeline counted %d + %d, test sent %d", rejected, decoder, st.Pipeline.Refused, len(bad))
	}
}

// checkHistogram: bucket counts are cumulative, non-decreasing with the
// upper bound, and none exceeds the sample count, which is the implicit
// +Inf bucket (Prometheus exposition formats: a histogram's buckets are
// cumulative and le="+Inf" equals _count).
func checkHistogram(t *testing.T, name string, h *dto.Histogram) {
	t.Helper()
	prevLe, prevN := math.Inf(-1), uint64(0)
	for _, b := range h.GetBucket() {
		if b.GetUpperBound() <= prevLe {
			t.Errorf("%s: bucket bounds not increasing: %v after %v", name, b.GetUpperBound(), prevLe)
		}
		if b.GetCumulativeCount() < prevN {
			t.Errorf("%s: bucket le=%v has %d < %d of the bucket below: not cumulative", name, b.GetUpperBound(), b.GetCumulativeCount(), prevN)
		}
		prevLe, prevN = b.GetUpperBound(), b.GetCumulativeCount()
	}
	if prevN > h.GetSampleCount() {
		t.Errorf("%s: last bucket %d > count %d", name, prevN, h.GetSampleCount())
	}
	if h.GetSampleCount() > 0 && !(h.GetSampleSum() > 0) {
		t.Errorf("%s: %d samples with sum %v; durations are positive", name, h.GetSampleCount(), h.GetSampleSum())
	}
}

// /readyz turns 503 while the broker is down and 200 again after the
// reconnect; /healthz stays 200 throughout (process alive).
func TestReadyzFollowsBroker(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	brokerAddr, url := b.Addr(), b.URL()
	cfg := liveConfig(t, url)
	d, err := New(Options{Config: cfg, HealthPeriod: 50 * time.Millisecond,
		MQTT: func(o *mqtt.Options) { o.MinBackoff, o.MaxBackoff = 20*time.Millisecond, 200*time.Millisecond }})
	if err != nil {
		t.Fatal(err)
	}
	stop := startDaemon(t, d)
	defer stop()
	if !waitFor(5*time.Second, func() bool { return d.MetricsAddr() != "" }) {
		t.Fatal("metrics endpoint not listening within 5 s")
	}
	base := "http://" + d.MetricsAddr()
	status := func(path string) (int, string) {
		code, body := httpGet(t, base+path)
		return code, string(body)
	}
	if !waitFor(5*time.Second, func() bool { c, _ := status("/readyz"); return c == http.StatusOK }) {
		t.Fatal("/readyz not 200 within 5 s of start")
	}
	if c, body := status("/healthz"); c != http.StatusOK {
		t.Errorf("/healthz %d %q", c, body)
	}

	if err := b.Close(); err != nil {
		t.Fatal(err)
	}
	var body string
	if !waitFor(5*time.Second, func() bool {
		var c int
		c, body = status("/readyz")
		return c == http.StatusServiceUnavailable
	}) {
		t.Fatal("/readyz still 200 five seconds after the broker went away")
	}
	if !strings.Contains(body, "not connected") {
		t.Errorf("/readyz reason %q does not say the broker is not connected", body)
	}
	if c, _ := status("/healthz"); c != http.StatusOK {
		t.Errorf("/healthz %d while the broker is down; the process is alive", c)
	}
	// The health evaluation goes on while the message cannot be sent: the
	// daemon reports the broker to the engine's watchdog, which raises
	// after health.raise_ms (500 ms by default, configs/REFERENCE.md), so
	// the state leaves ok; the gauge stays an enum with one state set.
	if !waitFor(3*time.Second, func() bool {
		fams, _ := scrape(t, d.MetricsAddr())
		c, _ := value(fams, "godwit_broker_connected")
		var sum float64
		for _, s := range healthStates {
			v, _ := value(fams, "godwit_health_state", "state", s)
			sum += v
		}
		ok, _ := value(fams, "godwit_health_state", "state", "ok")
		alerts, _ := value(fams, "godwit_health_alerts")
		return c == 0 && sum == 1 && ok == 0 && alerts >= 1
	}) {
		t.Error("broker_connected 0 with the health state out of ok and an alert not seen while the broker is down")
	}

	b2, err := broker.Start(broker.Config{Addr: brokerAddr})
	if err != nil {
		t.Fatalf("restart on %s: %v", brokerAddr, err)
	}
	defer b2.Close()
	if !waitFor(5*time.Second, func() bool { c, _ := status("/readyz"); return c == http.StatusOK }) {
		t.Fatal("/readyz not 200 within 5 s of the broker's return")
	}
	fams, _ := scrape(t, d.MetricsAddr())
	if v, ok := value(fams, "godwit_broker_reconnects_total"); !ok || v < 1 {
		t.Errorf("broker_reconnects_total %v (present %v), want ≥ 1", v, ok)
	}
	if v, ok := value(fams, "godwit_broker_connected"); !ok || v != 1 {
		t.Errorf("broker_connected %v after the reconnect", v)
	}
	stop()
	// The listener is closed with the daemon.
	if c, err := net.DialTimeout("tcp", strings.TrimPrefix(base, "http://"), time.Second); err == nil {
		c.Close()
		t.Error("metrics endpoint still accepts connections after Run returned")
	}
}

// metrics.listen "" turns the endpoint off; the registry still counts. A
// taken address is logged and the daemon fuses on without the endpoint.
func TestMetricsEndpointOffOrTaken(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	taken, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer taken.Close()
	for _, listen := range []string{"", taken.Addr().String()} {
		cfg := liveConfig(t, b.URL())
		cfg.Metrics.Listen = listen
		d, err := New(Options{Config: cfg})
		if err != nil {
			t.Fatal(err)
		}
		stop := startDaemon(t, d)
		if !waitConnected(d, 5*time.Second) {
			t.Fatalf("listen %q: daemon did not connect", listen)
		}
		pub := newPeer(t, b.URL(), cfg.Broker.ClientID+"-sensors")
		pub.pub(cfg.Sensors[0].Topic, []byte("not json"), false)
		pub.close()
		if !waitFor(3*time.Second, func() bool { return d.Stats().Pipeline.Messages == 1 }) {
			t.Errorf("listen %q: the message did not arrive", listen)
		}
		if d.MetricsAddr() != "" {
			t.Errorf("listen %q: MetricsAddr %q, want none", listen, d.MetricsAddr())
		}
		stop()
		var m dto.Metric
		if err := d.metrics.rejected[0][transport.ReasonBadJSON].Write(&m); err != nil {
			t.Fatal(err)
		}
		if got := m.GetCounter().GetValue(); got != 1 {
			t.Errorf("listen %q: rejected{bad_json} %v, want 1", listen, got)
		}
	}
}

// The reason label values are the health message's counters.rejected codes
// (DESIGN.md v1 health message), in the same order.
func TestRejectReasonsMatchHealth(t *testing.T) {
	p, err := NewPipeline(dockPost(t), engine.Options{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	p.Health(0, nil)
	var codes []string
	for _, rc := range p.health.Counters.Rejected {
		codes = append(codes, rc.Reason)
	}
	if strings.Join(codes, ",") != strings.Join(rejectReasons, ",") {
		t.Errorf("metric reasons %v, health counters %v", rejectReasons, codes)
	}
}

// Refusals by the engine carry the code the engine counts for them
// (engine.validate and Ingest): each sentinel maps onto its reason, and a
// repeated message through the pipeline is "duplicate".
func TestEngineRefusalReasons(t *testing.T) {
	for _, c := range []struct {
		err  error
		want string
	}{
		{engine.ErrBadSensor, "unknown_sensor"},
		{fmt.Errorf("%w: gate_lidar dets[0]", engine.ErrBadDims), "bad_dims"},
		{engine.ErrEgoSingle, "bad_dims"},
		{fmt.Errorf("%w: x", engine.ErrNonFinite), "non_finite"},
		{fmt.Errorf("%w: x", engine.ErrBadCov), "bad_cov"},
		{engine.ErrDuplicate, "duplicate"},
		{fmt.Errorf("engine: gnss dets[0]: %w", fmt.Errorf("%w: latitude 91 deg", geo.ErrRange)), "out_of_range"},
		{fmt.Errorf("engine: snapshot: %w", io.ErrShortBuffer), "other"},
	} {
		if got := rejectReasons[engineReason(c.err)]; got != c.want {
			t.Errorf("%v: reason %s, want %s", c.err, got, c.want)
		}
	}

	cfg := dockPost(t)
	p, err := NewPipeline(cfg, engine.Options{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	now := time.Now().UnixNano()
	msg := gatesim.NewScene(cfg, now, 5).Payload(0, 1, now)
	if err := p.Handle(cfg.Sensors[0].Topic, msg, now); err != nil {
		t.Fatal(err)
	}
	if p.last != (handled{sensor: 0, outcome: outcomeAccepted}) {
		t.Errorf("first message: %+v", p.last)
	}
	if err := p.Handle(cfg.Sensors[0].Topic, msg, now+1); err == nil {
		t.Fatal("a repeated message was taken")
	}
	if p.last.sensor != 0 || rejectReasons[p.last.outcome] != "duplicate" {
		t.Errorf("repeated message: sensor %d, outcome %d; want 0, duplicate", p.last.sensor, p.last.outcome)
	}
	if err := p.Handle("elsewhere/topic", msg, now+2); err == nil || p.last.outcome != outcomeOtherTopic {
		t.Errorf("other topic: %v, %+v", err, p.last)
	}
}

// The state gauge is an enum: the evaluated state at 1, every other at 0.
func TestHealthStateGauge(t *testing.T) {
	d, err := New(Options{Config: dockPost(t)})
	if err != nil {
		t.Fatal(err)
	}
	for _, state := range []string{"degraded", "failed", "ok"} {
		d.metrics.healthOut(state, 2)
		for i, s := range healthStates {
			var m dto.Metric
			if err := d.metrics.health[i].Write(&m); err != nil {
				t.Fatal(err)
			}
			want := 0.0
			if s == state {
				want = 1
			}
			if got := m.GetGauge().GetValue(); got != want {
				t.Errorf("after %s: health_state{%s} = %v, want %v", state, s, got, want)
			}
		}
	}
}

// A change of the engine's health (here a messages_lost alert after a seq
// gap, raised once it has held health.raise_ms) is published at once, not
// at the next health tick (issue 5: "at once on a change of state").
func TestHealthPublishedOnChange(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	cfg := liveConfig(t, b.URL())
	watch := newPeer(t, b.URL(), cfg.Broker.ClientID+"-watch")
	defer watch.close()
	watch.sub(cfg.Output.HealthTopic)
	// No health tick within the test: only the connect and a change publish.
	d, err := New(Options{Config: cfg, HealthPeriod: time.Hour})
	if err != nil {
		t.Fatal(err)
	}
	stop := startDaemon(t, d)
	defer stop()
	if !waitConnected(d, 5*time.Second) {
		t.Fatal("daemon did not connect")
	}
	pub := newPeer(t, b.URL(), cfg.Broker.ClientID+"-sensors")
	defer pub.close()
	scene := gatesim.NewScene(cfg, time.Now().UnixNano(), 6)
	lost := func(m peerMsg) bool {
		return m.topic == cfg.Output.HealthTopic && strings.Contains(string(m.payload), `"code":"messages_lost"`)
	}
	var seq uint64 = 1
	deadline := time.Now().Add(5 * time.Second)
	for time.Now().Before(deadline) {
		seq++
		if seq == 3 {
			seq = 6 // seq 3..5 missing
		}
		pub.pub(cfg.Sensors[0].Topic, scene.Payload(0, seq, time.Now().UnixNano()), false)
		time.Sleep(50 * time.Millisecond)
		if _, ok := watch.await(0, lost); ok {
			return
		}
	}
	t.Errorf("no health message with messages_lost within 5 s and no health tick; stats %+v", d.Stats().Pipeline)
}
