package fleet

import (
	"errors"
	"fmt"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/transport"
	"pgregory.net/rapid"
)

// t0 is an invented monitor time (2030-03-17 09:00 UTC in ns).
const t0 = int64(1_900_000_000_000_000_000)

// designExample is the health message of DESIGN.md ("Health message on
// output.health_topic"), with its elided times filled in.
const designExample = `{"v":1,"vehicle":"shuttle-07","t_ns":1764626400150000000,"state":"degraded",
 "alerts":[{"code":"sensor_silent","sensor":"front_camera","since_ns":1764626399670000000,"detail":"no message for 480 ms (period 66 ms)"}],
 "sensors":{"front_radar":{"rate_hz":19.9,"age_ms":35,"lost":0,"rejected":0,"late_dropped":0,"nis_ok":true}},
 "counters":{"rejected":{"bad_json":3},"late_dropped":0}, "latency_ms":{"p50":1.2,"p99":4.8}}`

// healthMsg encodes a v1 health message with godwit's own encoder
// (transport.AppendHealth), so the tests feed what a daemon publishes.
func healthMsg(t testing.TB, vehicle string, tNs int64, state string, alerts ...transport.Alert) []byte {
	t.Helper()
	m := transport.HealthMsg{V: 1, Vehicle: vehicle, TNs: tNs, State: state, Alerts: alerts,
		Sensors: []transport.SensorHealth{{Name: "front_radar", RateHz: 20, AgeMS: 12, NISOK: true}}}
	b, err := transport.AppendHealth(nil, &m)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func mustHandle(t *testing.T, s *Store, topic string, payload []byte, retained bool, at int64) {
	t.Helper()
	if err := s.Handle(topic, payload, retained, at); err != nil {
		t.Fatalf("Handle(%s): %v", topic, err)
	}
}

func state(t *testing.T, s *Store, id string) string {
	t.Helper()
	v, ok := s.Vehicle(id)
	if !ok {
		t.Fatalf("vehicle %s unknown", id)
	}
	return v.State
}

func TestDecodeDesignExample(t *testing.T) {
	s := NewStore(StoreConfig{})
	mustHandle(t, s, "godwit/shuttle-07/health", []byte(designExample), true, t0)
	v, _ := s.Vehicle("shuttle-07")
	// Every expected value is read off the example in DESIGN.md.
	if v.State != "degraded" || v.Reported != "degraded" || v.HealthTNs != 1764626400150000000 {
		t.Fatalf("state/time: %+v", v)
	}
	want := []AlertView{{Code: "sensor_silent", Sensor: "front_camera", SinceNs: 1764626399670000000,
		Detail: "no message for 480 ms (period 66 ms)"}}
	if !reflect.DeepEqual(v.Alerts, want) {
		t.Fatalf("alerts %+v, want %+v", v.Alerts, want)
	}
	if len(v.Sensors) != 1 || v.Sensors[0].Name != "front_radar" || *v.Sensors[0].RateHz != 19.9 ||
		*v.Sensors[0].AgeMS != 35 || !v.Sensors[0].NISOK {
		t.Fatalf("sensors %+v", v.Sensors)
	}
	if v.Rejected != 3 || *v.LatencyP50 != 1.2 || *v.LatencyP99 != 4.8 {
		t.Fatalf("counters/latency: rejected %d p50 %v p99 %v", v.Rejected, *v.LatencyP50, *v.LatencyP99)
	}
	// A retained message is old news: it must not count as a live sighting.
	if v.LastSeenNs != 0 {
		t.Fatalf("last seen %d after a retained message, want 0", v.LastSeenNs)
	}
}

// The decoder must read back exactly what godwit's encoder writes, for any
// message: two independent implementations of the same v1 contract.
func TestDecodeRoundTripsEncoder(t *testing.T) {
	name := rapid.StringMatching(`[a-z][a-z0-9_]{0,11}`)
	rapid.Check(t, func(rt *rapid.T) {
		m := transport.HealthMsg{V: 1, Vehicle: name.Draw(rt, "vehicle"),
			TNs:   rapid.Int64Range(1, math.MaxInt64).Draw(rt, "t"),
			State: rapid.SampledFrom([]string{"ok", "degraded", "failed"}).Draw(rt, "state")}
		for i, n := 0, rapid.IntRange(0, 4).Draw(rt, "alerts"); i < n; i++ {
			m.Alerts = append(m.Alerts, transport.Alert{Code: name.Draw(rt, "code"),
				Severity: rapid.SampledFrom([]string{"", "warning", "error"}).Draw(rt, "sev"),
				Sensor:   rapid.SampledFrom([]string{"", "front_radar"}).Draw(rt, "sensor"),
				Track:    rapid.Uint64().Draw(rt, "track"), SinceNs: rapid.Int64().Draw(rt, "since"),
				Detail: rapid.String().Draw(rt, "detail")})
		}
		seen := map[string]bool{}
		for i, n := 0, rapid.IntRange(0, 4).Draw(rt, "sensors"); i < n; i++ {
			sn := name.Draw(rt, "sname")
			if seen[sn] {
				continue // an object has unique keys
			}
			seen[sn] = true
			m.Sensors = append(m.Sensors, transport.SensorHealth{Name: sn,
				RateHz: rapid.Float64Range(0, 1e4).Draw(rt, "rate"), AgeMS: rapid.Float64Range(-1, 1e7).Draw(rt, "age"),
				Lost: rapid.Uint64().Draw(rt, "lost"), Rejected: rapid.Uint64().Draw(rt, "rej"),
				LateDropped: rapid.Uint64().Draw(rt, "late"), NISOK: rapid.Bool().Draw(rt, "nis")})
		}
		m.LatencyMS = transport.Latency{P50: rapid.Float64Range(0, 1e3).Draw(rt, "p50"), P99: rapid.Float64Range(0, 1e3).Draw(rt, "p99")}
		b, err := transport.AppendHealth(nil, &m)
		if err != nil {
			rt.Fatal(err)
		}
		var d healthDecoder
		h, err := d.decode("godwit/x/health", b)
		if err != nil {
			rt.Fatalf("%v\n%s", err, b)
		}
		if h.Vehicle != m.Vehicle || h.TNs != m.TNs || h.State != m.State || h.LatencyMS != m.LatencyMS {
			rt.Fatalf("header %+v from %s", h, b)
		}
		if len(h.Alerts) != len(m.Alerts) || (len(m.Alerts) > 0 && !reflect.DeepEqual(h.Alerts, m.Alerts)) {
			rt.Fatalf("alerts %+v, want %+v", h.Alerts, m.Alerts)
		}
		if len(h.Sensors) != len(m.Sensors) || (len(m.Sensors) > 0 && !reflect.DeepEqual(h.Sensors, m.Sensors)) {
			rt.Fatalf("sensors %+v, want %+v", h.Sensors, m.Sensors)
		}
	})
}

// A non-finite value is encoded as null (transport.ErrNonFinite); the
// monitor shows it as not known instead of refusing the whole report.
func TestDecodeNullIsUnknown(t *testing.T) {
	m := transport.HealthMsg{V: 1, Vehicle: "yard-3", TNs: t0, State: "ok",
		Sensors: []transport.SensorHealth{{Name: "lidar", RateHz: math.NaN(), AgeMS: math.Inf(1)}}}
	b, err := transport.AppendHealth(nil, &m)
	if !errors.Is(err, transport.ErrNonFinite) {
		t.Fatalf("encoder: %v, want ErrNonFinite", err)
	}
	s := NewStore(StoreConfig{})
	mustHandle(t, s, "godwit/yard-3/health", b, false, t0)
	v, _ := s.Vehicle("yard-3")
	if v.Sensors[0].RateHz != nil || v.Sensors[0].AgeMS != nil {
		t.Fatalf("rate %v age %v, want null for both", v.Sensors[0].RateHz, v.Sensors[0].AgeMS)
	}
}

func TestBadMessagesCountedNotApplied(t *testing.T) {
	s := NewStore(StoreConfig{})
	good := healthMsg(t, "tractor-4", t0, "ok")
	mustHandle(t, s, "godwit/tractor-4/health", good, false, t0)
	before, _ := s.Vehicle("tractor-4")
	cases := []struct {
		topic, payload, reason string
	}{
		{"godwit/tractor-4/health", `{"v":1,`, ReasonBadJSON},
		{"godwit/tractor-4/health", `[1,2]`, ReasonBadJSON},
		{"godwit/tractor-4/health", `{"v":2,"vehicle":"tractor-4","t_ns":5,"state":"ok","alerts":[]}`, ReasonBadVersion},
		{"godwit/tractor-4/health", `{"vehicle":"tractor-4","t_ns":5,"state":"ok","alerts":[]}`, ReasonBadVersion},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":5,"state":"fine","alerts":[]}`, ReasonBadField},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":5.5,"state":"ok","alerts":[]}`, ReasonBadField},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":-5,"state":"ok","alerts":[]}`, ReasonBadField},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":5,"state":"ok"}`, ReasonBadField},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":5,"state":"ok","alerts":[{"since_ns":1}]}`, ReasonBadField},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":5,"state":"ok","alerts":[],"sensors":{"a":{"rate_hz":"fast"}}}`, ReasonBadField},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":5,"state":"ok","alerts":[],"sensors":{"a":{"lost":-1}}}`, ReasonBadField},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":5,"state":"ok","alerts":[],"sensors":{"a":{"rate_hz":1e999}}}`, ReasonBadField},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"other","t_ns":5,"state":"ok","alerts":[]}`, ReasonVehicleMismatch},
		{"godwit/tractor-4/health", `{"v":1,"vehicle":"tractor-4","t_ns":5,"state":"ok","alerts":[],"pad":"` + strings.Repeat("x", MaxHealthBytes) + `"}`, ReasonTooLarge},
		{"godwit/tractor-4/status", `maybe`, ReasonBadStatus},
		{"godwit/tractor-4/tracks", `{}`, ReasonBadField},
		{"elsewhere/tractor-4/health", string(good), ReasonBadField},
	}
	for i, c := range cases {
		err := s.Handle(c.topic, []byte(c.payload), false, t0+int64(i+1))
		var re *RejectError
		if !errors.As(err, &re) || re.Reason != c.reason {
			t.Errorf("case %d (%.60s): err %v, want reason %s", i, c.payload, err, c.reason)
		}
	}
	after, _ := s.Vehicle("tractor-4")
	after.BadMessages, before.BadMessages = 0, 0
	if !reflect.DeepEqual(before, after) {
		t.Fatalf("a refused message changed the vehicle:\nbefore %+v\nafter  %+v", before, after)
	}
	c := s.Counters()
	var total uint64
	for _, n := range c.Rejected {
		total += n
	}
	if total != uint64(len(cases)) || c.Rejected[ReasonBadJSON] != 2 || c.Health != 1 {
		t.Fatalf("counters %+v, want %d rejected (2 bad_json) and 1 health", c, len(cases))
	}
	if _, ok := s.Vehicle("other"); ok {
		t.Fatal("a refused message created a vehicle")
	}
}

// Silence is judged on the monitor's own clock, with no message needed
// ("no health for N seconds", a heartbeat timeout: common practice).
func TestSilenceWithInjectedClock(t *testing.T) {
	s := NewStore(StoreConfig{SilentAfter: 5 * time.Second})
	topic := "godwit/shuttle-2/health"
	mustHandle(t, s, topic, healthMsg(t, "shuttle-2", 100, "ok"), false, t0)
	s.Sweep(t0 + 5*int64(time.Second)) // exactly the limit: not yet "more than"
	if got := state(t, s, "shuttle-2"); got != StateOK {
		t.Fatalf("at the limit: %s, want ok", got)
	}
	s.Sweep(t0 + 5*int64(time.Second) + 1)
	if got := state(t, s, "shuttle-2"); got != StateSilent {
		t.Fatalf("past the limit: %s, want silent", got)
	}
	// The broker replaying the retained message is no sign of life.
	mustHandle(t, s, topic, healthMsg(t, "shuttle-2", 200, "ok"), true, t0+6*int64(time.Second))
	if got := state(t, s, "shuttle-2"); got != StateSilent {
		t.Fatalf("after a retained message: %s, want still silent", got)
	}
	mustHandle(t, s, topic, healthMsg(t, "shuttle-2", 300, "degraded"), false, t0+7*int64(time.Second))
	if got := state(t, s, "shuttle-2"); got != StateDegraded {
		t.Fatalf("after a live message: %s, want degraded (what it reports)", got)
	}
	var trans []string
	for _, e := range s.Changes(0, t0).Events {
		if e.Kind == EventState {
			trans = append(trans, e.From+">"+e.To)
		}
	}
	if want := []string{">ok", "ok>silent", "silent>degraded"}; !reflect.DeepEqual(trans, want) {
		t.Fatalf("state events %v, want %v", trans, want)
	}
	if c := s.Counters(); c.Silenced != 1 {
		t.Fatalf("silenced %d, want 1", c.Silenced)
	}
}

// A vehicle that announces itself online and never reports is silent too.
func TestSilentAfterOnlineWithoutHealth(t *testing.T) {
	s := NewStore(StoreConfig{SilentAfter: time.Second})
	mustHandle(t, s, "godwit/robot-9/status", []byte("online"), false, t0)
	if got := state(t, s, "robot-9"); got != StateUnknown {
		t.Fatalf("%s, want unknown before any health", got)
	}
	s.Sweep(t0 + 2*int64(time.Second))
	if got := state(t, s, "robot-9"); got != StateSilent {
		t.Fatalf("%s, want silent", got)
	}
}

// The status topic carries "online" and the last will "offline" (MQTT
// 3.1.1 §3.1.2.5, Will Flag, from memory; DESIGN.md).
func TestOfflineFromStatus(t *testing.T) {
	s := NewStore(StoreConfig{SilentAfter: time.Second})
	mustHandle(t, s, "godwit/shuttle-5/health", healthMsg(t, "shuttle-5", 1, "ok"), false, t0)
	mustHandle(t, s, "godwit/shuttle-5/status", []byte("offline"), false, t0+1)
	if got := state(t, s, "shuttle-5"); got != StateOffline {
		t.Fatalf("%s, want offline", got)
	}
	s.Sweep(t0 + 10*int64(time.Second)) // offline is final until it comes back; not silent
	if got := state(t, s, "shuttle-5"); got != StateOffline {
		t.Fatalf("%s after sweep, want offline", got)
	}
	// A retained health message replayed after the will must not revive it.
	mustHandle(t, s, "godwit/shuttle-5/health", healthMsg(t, "shuttle-5", 2, "ok"), true, t0+11*int64(time.Second))
	if got := state(t, s, "shuttle-5"); got != StateOffline {
		t.Fatalf("%s after retained health, want offline", got)
	}
	mustHandle(t, s, "godwit/shuttle-5/status", []byte("online\n"), false, t0+12*int64(time.Second))
	if got := state(t, s, "shuttle-5"); got != StateOK {
		t.Fatalf("%s after online, want ok", got)
	}
}

func TestAlertsRaisedAndCleared(t *testing.T) {
	s := NewStore(StoreConfig{})
	topic := "godwit/yard-7/health"
	silent := transport.Alert{Code: "sensor_silent", Severity: "warning", Sensor: "gate_lidar", SinceNs: 50, Detail: "no message for 400 ms"}
	lost := transport.Alert{Code: "messages_lost", Severity: "warning", Sensor: "gate_radar", SinceNs: 60}
	mustHandle(t, s, topic, healthMsg(t, "yard-7", 10, "ok"), false, t0)
	mustHandle(t, s, topic, healthMsg(t, "yard-7", 20, "degraded", silent), false, t0+1)
	mustHandle(t, s, topic, healthMsg(t, "yard-7", 30, "degraded", silent, lost), false, t0+2)
	mustHandle(t, s, topic, healthMsg(t, "yard-7", 40, "degraded", lost), false, t0+3)
	var got []string
	for _, e := range s.Changes(0, t0).Events {
		if e.Kind != EventState {
			got = append(got, fmt.Sprintf("%s %s/%s@%d since %d", e.Kind, e.Code, e.Sensor, e.AtNs-t0, e.SinceNs))
		}
	}
	want := []string{"raised sensor_silent/gate_lidar@1 since 50", "raised messages_lost/gate_radar@2 since 60",
		"cleared sensor_silent/gate_lidar@3 since 50"}
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("events\n%q\nwant\n%q", got, want)
	}
	if c := s.Counters(); c.Raised != 2 || c.Cleared != 1 {
		t.Fatalf("raised %d cleared %d, want 2 and 1", c.Raised, c.Cleared)
	}
}

func TestHistoryBounded(t *testing.T) {
	const keep = 8
	s := NewStore(StoreConfig{History: keep})
	topic := "godwit/robot-1/health"
	a := transport.Alert{Code: "overrun", SinceNs: 1}
	for i := 1; i <= 40; i++ {
		var msg []byte
		if i%2 == 0 {
			msg = healthMsg(t, "robot-1", int64(i), "degraded", a)
		} else {
			msg = healthMsg(t, "robot-1", int64(i), "ok")
		}
		mustHandle(t, s, topic, msg, false, t0+int64(i))
	}
	evs := s.Changes(0, t0).Events
	if len(evs) != keep {
		t.Fatalf("%d events kept, want %d", len(evs), keep)
	}
	for i := 1; i < len(evs); i++ {
		if evs[i].Seq <= evs[i-1].Seq {
			t.Fatalf("history out of order at %d: %d after %d", i, evs[i].Seq, evs[i-1].Seq)
		}
	}
	// The newest survive: the last message (i = 40, degraded) raised overrun.
	last := evs[len(evs)-1]
	if last.AtNs != t0+40 {
		t.Fatalf("newest event at %d, want the last message's %d", last.AtNs-t0, 40)
	}
	if c := s.Counters(); c.Raised != 20 || c.Cleared != 19 {
		t.Fatalf("counters raised %d cleared %d, want 20 and 19 (counted beyond the ring)", c.Raised, c.Cleared)
	}
}

func TestRetainedStaleIgnored(t *testing.T) {
	s := NewStore(StoreConfig{})
	topic := "godwit/shuttle-1/health"
	mustHandle(t, s, topic, healthMsg(t, "shuttle-1", 500, "degraded"), false, t0)
	// A reconnect replays the retained message; an older one must not win.
	mustHandle(t, s, topic, healthMsg(t, "shuttle-1", 400, "ok"), true, t0+1)
	mustHandle(t, s, topic, healthMsg(t, "shuttle-1", 500, "ok"), true, t0+2)
	if got := state(t, s, "shuttle-1"); got != StateDegraded {
		t.Fatalf("%s, want degraded", got)
	}
	if c := s.Counters(); c.Stale != 2 || c.Health != 1 {
		t.Fatalf("stale %d health %d, want 2 and 1", c.Stale, c.Health)
	}
}

func TestMaxVehicles(t *testing.T) {
	s := NewStore(StoreConfig{MaxVehicles: 2})
	for i, id := range []string{"a", "b"} {
		mustHandle(t, s, "godwit/"+id+"/health", healthMsg(t, id, 1, "ok"), false, t0+int64(i))
	}
	err := s.Handle("godwit/c/status", []byte("online"), false, t0+5)
	var re *RejectError
	if !errors.As(err, &re) || re.Reason != ReasonTooManyVehicles {
		t.Fatalf("third vehicle: %v, want %s", err, ReasonTooManyVehicles)
	}
	if got := len(s.Changes(0, t0).Vehicles); got != 2 {
		t.Fatalf("%d vehicles, want 2", got)
	}
}

// Shared subscriptions are $share/{ShareName}/{filter} (MQTT 5.0 §4.8.2, from memory).
func TestFilters(t *testing.T) {
	s := NewStore(StoreConfig{TopicRoot: "site-a/godwit"})
	if got, want := s.Filters(""), []string{"site-a/godwit/+/health", "site-a/godwit/+/status"}; !reflect.DeepEqual(got, want) {
		t.Fatalf("%v, want %v", got, want)
	}
	want := []string{"$share/watch/site-a/godwit/+/health", "$share/watch/site-a/godwit/+/status"}
	if got := s.Filters("watch"); !reflect.DeepEqual(got, want) {
		t.Fatalf("%v, want %v", got, want)
	}
	mustHandle(t, s, "site-a/godwit/v1/status", []byte("online"), false, t0)
	if err := s.Handle("site-a/godwit/v1/extra/status", []byte("online"), false, t0); err == nil {
		t.Fatal("a topic with an extra level was taken")
	}
}

func TestWatchWakes(t *testing.T) {
	s := NewStore(StoreConfig{})
	ch, stop := s.Watch()
	defer stop()
	if s.Watchers() != 1 {
		t.Fatalf("%d watchers, want 1", s.Watchers())
	}
	mustHandle(t, s, "godwit/a/status", []byte("online"), false, t0)
	select {
	case <-ch:
	default:
		t.Fatal("no wake-up after a change")
	}
	v0 := s.Changes(0, t0).Version
	mustHandle(t, s, "godwit/b/status", []byte("online"), false, t0)
	ch2 := s.Changes(v0, t0)
	if len(ch2.Vehicles) != 1 || ch2.Vehicles[0].Vehicle != "b" {
		t.Fatalf("changes since %d: %+v, want only b", v0, ch2.Vehicles)
	}
}

func TestLogLimiter(t *testing.T) {
	var l logLimiter
	at := time.Unix(0, t0)
	if _, ok := l.allow("bad_json", at); !ok {
		t.Fatal("first line held back")
	}
	for i := 1; i <= 3; i++ {
		if _, ok := l.allow("bad_json", at.Add(time.Duration(i)*time.Second)); ok {
			t.Fatalf("line %d within 10 s let through", i)
		}
	}
	if _, ok := l.allow("bad_field", at); !ok {
		t.Fatal("another reason held back")
	}
	if n, ok := l.allow("bad_json", at.Add(10*time.Second)); !ok || n != 3 {
		t.Fatalf("after 10 s: ok %v, held %d, want true and 3", ok, n)
	}
}
