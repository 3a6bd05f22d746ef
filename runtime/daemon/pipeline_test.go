package daemon

import (
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"go.uber.org/zap"
	"go.uber.org/zap/zapcore"
	"go.uber.org/zap/zaptest/observer"
)

// The examples of MQTT 3.1.1 (OASIS 2014) §4.7.1.2, §4.7.1.3 and §4.7.2.
func TestTopicMatches(t *testing.T) {
	for _, c := range []struct {
		filter, topic string
		want          bool
	}{
		{"sport/tennis/player1/#", "sport/tennis/player1", true},
		{"sport/tennis/player1/#", "sport/tennis/player1/ranking", true},
		{"sport/tennis/player1/#", "sport/tennis/player1/score/wimbledon", true},
		{"sport/#", "sport", true},
		{"#", "sport/tennis", true},
		{"sport/tennis/+", "sport/tennis/player1", true},
		{"sport/tennis/+", "sport/tennis/player1/tournament", false},
		{"sport/+", "sport", false},
		{"sport/+", "sport/", true},
		{"+/+", "/finance", true},
		{"/+", "/finance", true},
		{"+", "/finance", false},
		{"#", "$SYS/broker", false},
		{"+/monitor/Clients", "$SYS/monitor/Clients", false},
		{"$SYS/#", "$SYS/broker", true},
		{"dock-post-2/sensors/gate_radar", "dock-post-2/sensors/gate_radar", true},
		{"dock-post-2/sensors/gate_radar", "dock-post-2/sensors/gate_lidar", false},
		{"a/b", "a/b/c", false},
	} {
		if got := TopicMatches(c.filter, c.topic); got != c.want {
			t.Errorf("TopicMatches(%q, %q) = %v, want %v", c.filter, c.topic, got, c.want)
		}
	}
}

// A flood of bad messages gives one log line per reason per second of
// arrival time (STYLE.md), while every one of them is counted.
func TestRejectsAreCountedAndLogRateLimited(t *testing.T) {
	core, logs := observer.New(zapcore.WarnLevel)
	cfg := dockPost(t)
	p, err := NewPipeline(cfg, engine.Options{}, zap.New(core))
	if err != nil {
		t.Fatal(err)
	}
	t0 := gatesim.T0
	for i := 0; i < 1000; i++ { // 1000 messages over 2.5 s
		at := t0 + int64(i)*int64(2500*time.Microsecond)
		if err := p.Handle(cfg.Sensors[0].Topic, []byte(`{"v":1,`), at); err == nil {
			t.Fatal("a broken payload was accepted")
		}
	}
	if got := p.Stats().Rejected[0]; got != 1000 { // bad_json is reason 0
		t.Fatalf("bad_json counted %d, want 1000", got)
	}
	if r := p.RejectedByReason(); r["bad_json"] != 1000 {
		t.Fatalf("engine counters %v", r)
	}
	// Lines at 0 s, 1 s and 2 s of the 2.5 s flood.
	if n := logs.FilterMessage("rejected message").Len(); n != 3 {
		t.Fatalf("%d log lines for a 2.5 s flood, want 3", n)
	}
	e := logs.All()[1].ContextMap()
	if e["reason"] != "bad_json" || e["suppressed_since_last"] != uint64(399) {
		t.Fatalf("second line %v", e)
	}
}

func TestDecoderLimits(t *testing.T) {
	cfg := dockPost(t)
	l := DecoderLimits(cfg)
	// dock-post.yaml: max_payload_bytes 32768; time_window_ms defaults to
	// 10000 ms (configs/REFERENCE.md).
	if l.MaxPayloadBytes != 32768 || l.PastWindow != 10*time.Second || l.FutureWindow != 10*time.Second {
		t.Fatalf("%+v", l)
	}
	cfg.Timing.Clock = configs.ClockEstimate
	if l := DecoderLimits(cfg); l.PastWindow >= 0 || l.FutureWindow >= 0 {
		t.Fatalf("free-running clocks still judged against arrival: %+v", l)
	}
}

// Nearest-rank percentiles (the rank is ⌈p·n⌉; common practice, from
// memory): for 1..100 ms the median is 50 and the 99th percentile 99.
func TestLatencySummary(t *testing.T) {
	l := latencies{pending: make([]int64, 0, 200)}
	if got := l.summary(); got.P50 != 0 || got.P99 != 0 {
		t.Fatalf("empty: %+v", got)
	}
	const pub = int64(10_000_000_000)
	for ms := int64(100); ms >= 1; ms-- { // arrival order does not matter
		l.arrived(pub - ms*1_000_000)
	}
	l.published(pub)
	if got := l.summary(); got.P50 != 50 || got.P99 != 99 {
		t.Fatalf("1..100 ms: %+v, want p50 50, p99 99", got)
	}
	// Only the last 1024 messages count: 2000 at 5 ms push the others out.
	for i := 0; i < 10; i++ {
		for k := 0; k < 200; k++ {
			l.arrived(pub - 5_000_000)
		}
		l.published(pub)
	}
	if got := l.summary(); got.P50 != 5 || got.P99 != 5 {
		t.Fatalf("after 2000 × 5 ms: %+v", got)
	}
}
