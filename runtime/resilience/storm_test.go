package resilience

import (
	"bytes"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/bench"
	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
)

// These tests drive the deterministic pipeline (decode, engine, encode)
// with recorded times, as a replay does: the outcome does not depend on the
// machine's speed, so the checks can be exact.

// replayed is what one pass over a workload gave.
type replayed struct {
	tracks [][]byte        // every tracks message, in order
	raised map[string]bool // "code/sensor" of every alert seen in health
	final  transport.TracksMsg
	p      *daemon.Pipeline
	stats  []engine.SensorStats
}

// extra is an injected message, offered just before workload message i.
type extra struct {
	topic   string
	payload []byte
}

func replay(t *testing.T, cfg *configs.Config, msgs []bench.Message, inject func(i int, m *bench.Message) []extra) *replayed {
	t.Helper()
	p, err := daemon.NewPipeline(cfg, engine.Options{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	r := &replayed{p: p, raised: map[string]bool{}}
	var h transport.HealthMsg
	var nextHealth int64
	for i := range msgs {
		m := &msgs[i]
		if inject != nil {
			for _, x := range inject(i, m) {
				if err := p.Handle(x.topic, x.payload, m.RxNs-1000); err == nil {
					t.Fatalf("message %d: injected %.60q was accepted", i, x.payload)
				}
			}
		}
		if err := p.Handle(m.Topic, m.Payload, m.RxNs); err == nil {
			if b, ok := p.Advance(m.RxNs); ok {
				r.tracks = append(r.tracks, append([]byte(nil), b...))
			}
		}
		if m.RxNs >= nextHealth {
			p.Engine().Health(m.RxNs, &h)
			for _, a := range h.Alerts {
				r.raised[a.Code+"/"+a.Sensor] = true
			}
			nextHealth = m.RxNs + int64(100*time.Millisecond)
		}
	}
	r.final = *p.LastTracks()
	r.final.Tracks = append([]transport.Track(nil), r.final.Tracks...)
	r.stats = p.Engine().Sensors(nil)
	if n := p.Stats().NonFinite; n != 0 {
		t.Errorf("%d encoded messages carried NaN/Inf", n)
	}
	return r
}

func workload(t *testing.T) (*configs.Config, []bench.Message) {
	t.Helper()
	cfg, err := bench.Config(bench.ConfigParams{})
	if err != nil {
		t.Fatal(err)
	}
	msgs, err := bench.Generate(bench.Scene{Targets: 12, Clutter: 2, Seconds: 10, Seed: 21})
	if err != nil {
		t.Fatal(err)
	}
	return cfg, msgs
}

// sameTracks checks that every confirmed track of want has a confirmed
// track of got within tol metres: the targets are still tracked.
func sameTracks(t *testing.T, got, want *transport.TracksMsg, tol float64) {
	t.Helper()
	confirmed := 0
	for _, w := range want.Tracks {
		if w.Status != "confirmed" {
			continue
		}
		confirmed++
		best := math.Inf(1)
		for _, g := range got.Tracks {
			if g.Status == "confirmed" {
				best = min(best, math.Hypot(g.Pos[0]-w.Pos[0], g.Pos[1]-w.Pos[1]))
			}
		}
		if !(best <= tol) {
			t.Errorf("track %d at (%.1f, %.1f) of the clean run has no confirmed track within %g m (nearest %.2f m)",
				w.ID, w.Pos[0], w.Pos[1], tol, best)
		}
	}
	if confirmed < 12 {
		t.Errorf("the clean run confirms only %d tracks for 12 targets", confirmed)
	}
	for _, g := range got.Tracks {
		for _, v := range append(g.Pos[:], g.PosCov[:]...) {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("track %d carries a non-finite value", g.ID)
			}
		}
	}
}

// reencode returns m's payload with its time shifted and its seq replaced.
func reencode(t *testing.T, m *bench.Message, dtNs int64, seq uint64) []byte {
	t.Helper()
	mm := m.Meas
	mm.TNs += dtNs
	mm.Seq = seq
	b, err := transport.AppendMeasurement(nil, &mm)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// A storm of non-finite and malformed messages between the good ones: every
// one is refused and counted under the right reason, and the tracks output
// is byte for byte that of the same run without the storm (DESIGN.md: a
// rejected message changes no track).
func TestNaNAndMalformedStormChangesNoTrack(t *testing.T) {
	cfg, msgs := workload(t)
	clean := replay(t, cfg, msgs, nil)

	type storm struct {
		payload string
		reason  string // "" when only the refusal is checked
		why     string
	}
	big := `{"v":1,"sensor":"post_lidar","seq":1,"t_ns":1,"dets":[],"pad":"` + strings.Repeat("x", 262144) + `"}`
	stormOf := func(m *bench.Message) []storm {
		sensor, z, inf, ninf := "post_lidar", "[1,2]", "[1e999,2]", "[3,-1e400]"
		if m.Topic == bench.RadarTopic {
			sensor, z, inf, ninf = "post_radar", "[30,0.1,1]", "[1e999,0.1,1]", "[30,0.1,-1e400]"
		}
		head := `{"v":1,"sensor":"` + sensor + `","seq":` + itoa(int64(m.Meas.Seq)) + `,"t_ns":` + itoa(m.Meas.TNs) + `,"dets":`
		return []storm{
			{head + `[{"z":` + inf + `}]}`, "non_finite", "1e999 overflows float64 (IEEE 754): Inf"},
			{head + `[{"z":` + z + `},{"z":` + ninf + `}]}`, "non_finite", "-1e400 overflows float64: −Inf"},
			{head + `[{"z":` + z + `},{"z":[NaN,2,3]}]}`, "bad_json", "NaN is no JSON number (RFC 8259 §6)"},
			{head + `[{"z":[Infinity,0,0]}]}`, "bad_json", "Infinity is no JSON number (RFC 8259 §6)"},
			{head + `[{"z":` + z + `,"r":[1e999]}]}`, "", "non-finite covariance"},
			{head + `[{"z":` + z + `}`, "bad_json", "truncated (RFC 8259 grammar)"},
			{`not json`, "bad_json", "RFC 8259 grammar"},
			{``, "bad_json", "empty: no JSON text (RFC 8259 §2)"},
			{"\xff\xfe{}", "bad_json", "not UTF-8 (RFC 8259 §8.1)"},
			{`{"v":1,"sensor":"ghost","seq":1,"t_ns":` + itoa(m.Meas.TNs) + `,"dets":[]}`, "unknown_sensor", "DESIGN.md"},
			{head + `[{"z":[1,2,3,4]}]}`, "bad_dims", "DESIGN.md: wrong dimension"},
			{big, "too_large", "DESIGN.md: larger than limits.max_payload_bytes (256 KiB)"},
			{strings.Repeat("[", 100000), "", "deep nesting"},
			{`[]`, "", "not an object"},
			{`{}`, "", "no fields"},
		}
	}
	want := map[string]uint64{}
	injections := 0
	storming := replay(t, cfg, msgs, func(i int, m *bench.Message) []extra {
		if i%3 != 0 {
			return nil
		}
		injections++
		var xs []extra
		for _, s := range stormOf(m) {
			if s.reason != "" {
				want[s.reason]++
			}
			xs = append(xs, extra{m.Topic, []byte(s.payload)})
		}
		return xs
	})
	if len(storming.tracks) != len(clean.tracks) {
		t.Fatalf("%d tracks messages with the storm, %d without", len(storming.tracks), len(clean.tracks))
	}
	for i := range clean.tracks {
		if !bytes.Equal(storming.tracks[i], clean.tracks[i]) {
			t.Fatalf("tracks message %d differs with the storm:\n%.300s\nwithout:\n%.300s", i, storming.tracks[i], clean.tracks[i])
		}
	}
	got := storming.p.RejectedByReason()
	var total uint64
	for reason, n := range want {
		if got[reason] < n {
			t.Errorf("rejected %s: %d, want at least %d", reason, got[reason], n)
		}
	}
	for _, n := range got {
		total += n
	}
	if perStorm := uint64(len(stormOf(&msgs[0]))); total != perStorm*uint64(injections) {
		t.Errorf("%d rejections in all, want %d (%d storms of %d)", total, perStorm*uint64(injections), injections, perStorm)
	}
	for _, reason := range []string{"bad_json", "non_finite", "unknown_sensor", "bad_dims", "too_large"} {
		if got[reason] == 0 {
			t.Errorf("no %s rejection counted", reason)
		}
	}
	t.Logf("%d storms, rejections by reason %v", injections, got)
}

func itoa(v int64) string {
	var b [24]byte
	i := len(b)
	neg := v < 0
	if neg {
		v = -v
	}
	for {
		i--
		b[i] = byte('0' + v%10)
		v /= 10
		if v == 0 {
			break
		}
	}
	if neg {
		i--
		b[i] = '-'
	}
	return string(b[i:])
}
