package resilience

import (
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/runtime/bench"
	"github.com/godwit-fusion/godwit/transport"
)

const hourNs = int64(time.Hour)

// inWindow reports whether m arrived between from and to seconds of the scene.
func inWindow(m *bench.Message, from, to float64) bool {
	t := float64(m.RxNs-bench.Start.UnixNano()) * 1e-9
	return t >= from && t < to
}

// Synced clocks: the radar's clock jumps an hour ahead for one second, then
// comes back. Each of those messages is outside the plausible window
// (DESIGN.md: t_ns judged against the arrival time) and refused as
// time_implausible; none of them moves the engine's time, so nothing after
// them is dropped as late and every target is still tracked.
func TestSyncedClockJumpOfAnHourIsRefused(t *testing.T) {
	cfg, msgs := workload(t)
	clean := replay(t, cfg, msgs, nil)
	jumped := append([]bench.Message(nil), msgs...)
	n := 0
	for i := range jumped {
		if m := &jumped[i]; m.Topic == bench.RadarTopic && inWindow(m, 3, 4) {
			m.Payload = reencode(t, m, hourNs, m.Meas.Seq)
			n++
		}
	}
	r := replay(t, cfg, jumped, nil)
	if got := r.p.RejectedByReason()["time_implausible"]; got != uint64(n) {
		t.Errorf("time_implausible %d, want the %d jumped messages", got, n)
	}
	if c := r.p.Engine().Counters(); c.LateDropped != 0 {
		t.Errorf("%d late drops: a jumped message moved the engine's time", c.LateDropped)
	}
	if got, want := r.stats[1].Messages, clean.stats[1].Messages-uint64(n); got != want {
		t.Errorf("radar messages accepted %d, want %d", got, want)
	}
	sameTracks(t, &r.final, &clean.final, 1.0)
}

// Free-running clocks (timing.clock estimate): the radar's clock is reset an
// hour ahead and stays there. The offset estimate must follow, the jump
// must be reported (clock_offset_jump), no track may be predicted an hour
// ahead, and the targets stay tracked.
func TestFreeClockJumpOfAnHourIsFollowed(t *testing.T) {
	cfg, msgs := workload(t)
	cfg.Timing.Clock = "estimate"
	clean := replay(t, cfg, msgs, nil)
	jumped := append([]bench.Message(nil), msgs...)
	for i := range jumped {
		if m := &jumped[i]; m.Topic == bench.RadarTopic && inWindow(m, 3, 100) {
			m.Payload = reencode(t, m, hourNs, m.Meas.Seq)
		}
	}
	r := replay(t, cfg, jumped, nil)
	if !r.raised["clock_offset_jump/post_radar"] {
		t.Errorf("no clock_offset_jump alert for post_radar; alerts seen: %v", r.raised)
	}
	if r.raised["clock_offset_jump/post_lidar"] {
		t.Error("clock_offset_jump raised for post_lidar, whose clock did not move")
	}
	if d := r.final.TNs - clean.final.TNs; d > int64(time.Second) || d < -int64(time.Second) {
		t.Errorf("final tracks message stamped %.0f s away from the clean run's", float64(d)*1e-9)
	}
	rej := r.p.RejectedByReason()
	for reason, n := range rej {
		t.Logf("rejected %s: %d", reason, n)
	}
	sameTracks(t, &r.final, &clean.final, 1.0)
}

// The radar vanishes for 3 s and comes back (its sequence numbers go on
// where they stopped: it sent nothing meanwhile). sensor_silent must be
// raised for it while it is away and cleared after it returns; its
// messages after the return are accepted (none late, none lost), and the
// targets stay tracked throughout by the lidar.
func TestVanishingSensorReturns(t *testing.T) {
	cfg, msgs := workload(t)
	clean := replay(t, cfg, msgs, nil)
	var kept []bench.Message
	var seq uint64
	for i := range msgs {
		m := msgs[i]
		if m.Topic == bench.RadarTopic {
			if inWindow(&m, 3, 6) {
				continue
			}
			seq++
			m.Payload = reencode(t, &m, 0, seq)
		}
		kept = append(kept, m)
	}
	r := replay(t, cfg, kept, nil)
	t.Logf("clean run alerts %v", clean.raised)
	if !r.raised["sensor_silent/post_radar"] {
		t.Errorf("no sensor_silent alert for post_radar; alerts seen: %v", r.raised)
	}
	if r.raised["sensor_silent/post_lidar"] {
		t.Error("sensor_silent raised for post_lidar, which never stopped")
	}
	// The last 4 s after the return are longer than the silent alert's
	// clear time (health.clear_ms, 2 s by default).
	rad := r.stats[1]
	if rad.Messages != seq || rad.LateDropped != 0 || rad.Lost != 0 || rad.Rejected != 0 {
		t.Errorf("radar after its return: %d messages (want %d), %d late, %d lost, %d rejected",
			rad.Messages, seq, rad.LateDropped, rad.Lost, rad.Rejected)
	}
	var h transport.HealthMsg
	r.p.Engine().Health(kept[len(kept)-1].RxNs, &h)
	if h.State != "ok" {
		t.Errorf("health %s 4 s after the radar returned, want ok; alerts %+v", h.State, h.Alerts)
	}
	sameTracks(t, &r.final, &clean.final, 1.0)
}
