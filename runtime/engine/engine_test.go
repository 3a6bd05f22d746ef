package engine

import (
	"math/rand/v2"
	"testing"

	"github.com/godwit-fusion/godwit/transport"
)

func TestSmokeSingleTarget(t *testing.T) {
	s := &sim{r: rand.New(rand.NewPCG(1, 2)), sensors: []simSensor{{cfg: xySensor("mast_lidar", 0, 0, 0, 0.2)}},
		targets: []simTarget{{id: 1, x: [4]float64{10, 5, 1, 0.5}}}}
	msgs := s.run(t0 + 10e9)
	cfg := baseConfig(s.sensors[0].cfg)
	e, err := New(cfg, Options{})
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
	t.Logf("%+v", out.Tracks)
	t.Logf("%+v", e.Counters())
}
