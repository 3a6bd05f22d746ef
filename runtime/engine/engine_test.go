package engine

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/godwit-fusion/godwit/transport"
)

// TestSingleTargetStraightLine: one target at constant velocity seen by a
// position sensor ends up as exactly one confirmed track on the truth
// (within 3 s.d. of its reported position covariance, common practice),
// and every message was used.
func TestSingleTargetStraightLine(t *testing.T) {
	s := &sim{r: rand.New(rand.NewPCG(1, 2)), sensors: []simSensor{{cfg: xySensor("mast_lidar", 0, 0, 0, 0.2)}},
		targets: []simTarget{{id: 1, x: [4]float64{10, 5, 1, 0.5}}}}
	msgs := s.run(t0 + 10e9)
	e, err := New(baseConfig(s.sensors[0].cfg), Options{})
	if err != nil {
		t.Fatal(err)
	}
	var out transport.TracksMsg
	for i := range msgs {
		if err := e.Ingest(&msgs[i].m, msgs[i].m.TNs); err != nil {
			t.Fatal(err)
		}
		e.Advance(msgs[i].m.TNs, &out)
	}
	e.Flush(&out)
	if len(out.Tracks) != 1 || out.Tracks[0].Status != "confirmed" || out.Tracks[0].Hits != len(msgs) {
		t.Fatalf("tracks %+v", out.Tracks)
	}
	tr := out.Tracks[0]
	truth := [2]float64{10 + 1*10, 5 + 0.5*10} // x0 + v·t, no process noise in this scene
	for k := 0; k < 2; k++ {
		if d := math.Abs(tr.Pos[k] - truth[k]); d > 3*math.Sqrt(tr.PosCov[3*k]) {
			t.Errorf("position[%d] %.3f, truth %.3f: off by more than 3 s.d.", k, tr.Pos[k], truth[k])
		}
	}
	if c := e.Counters(); c.Births != 1 || c.Messages != uint64(len(msgs)) || c.Emitted != uint64(len(msgs)+1) {
		t.Errorf("counters %+v", c)
	}
}
