// Command embed shows godwit's fusion engine used as a plain Go library,
// without MQTT: it loads the shipped "dock-post" configuration (a fixed
// post at the gate of an invented container yard, with a radar and a
// lidar), invents the measurements of two yard tractors driving through
// the gate, feeds them to the engine and prints the fused tracks.
//
//	go run ./examples/embed
package main

import (
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
)

func main() {
	if err := run(os.Stdout, 20); err != nil {
		fmt.Fprintln(os.Stderr, "embed:", err)
		os.Exit(1)
	}
}

// tractor drives in a straight line through the yard (site frame: x east,
// y north, metres).
type tractor struct{ x, y, vx, vy float64 }

func (t tractor) at(s float64) (x, y, vx, vy float64) { return t.x + t.vx*s, t.y + t.vy*s, t.vx, t.vy }

// run feeds `seconds` of invented traffic through the engine and writes
// one line per output message each second, then the final tracks.
func run(w io.Writer, seconds int) error {
	cfg, err := configs.Example("dock-post")
	if err != nil {
		return err
	}
	eng, err := engine.New(cfg, engine.Options{})
	if err != nil {
		return err
	}
	tractors := []tractor{{-30, 20, 3, 0.5}, {25, 60, -2, -1.5}}
	r := rand.New(rand.NewPCG(1, 2))
	const t0 = int64(1_764_626_400_000_000_000)
	platformYaw := cfg.Platform.Pose.YawDeg * math.Pi / 180

	// One reused message and one reused output buffer, as a daemon would.
	var m transport.Measurement
	var out transport.TracksMsg
	seq := make([]uint64, len(cfg.Sensors))
	for ms := int64(0); ms < int64(seconds)*1000; ms += 10 {
		tNs := t0 + ms*1_000_000
		for k, sc := range cfg.Sensors {
			if ms%int64(sc.PeriodMS) != 0 {
				continue
			}
			seq[k]++
			m = transport.Measurement{V: 1, Sensor: sc.Name, SensorIdx: k, Seq: seq[k], TNs: tNs, Dets: m.Dets[:0]}
			yaw := platformYaw + sc.Mount.YawDeg*math.Pi/180
			c, s := math.Cos(platformYaw), math.Sin(platformYaw)
			sx := cfg.Platform.Pose.X + c*sc.Mount.X - s*sc.Mount.Y
			sy := cfg.Platform.Pose.Y + s*sc.Mount.X + c*sc.Mount.Y
			for _, tr := range tractors {
				x, y, vx, vy := tr.at(float64(ms) / 1000)
				dx, dy := x-sx, y-sy
				xs := math.Cos(yaw)*dx + math.Sin(yaw)*dy // sensor frame: x forward, y left
				ys := -math.Sin(yaw)*dx + math.Cos(yaw)*dy
				rng, brg := math.Hypot(xs, ys), math.Atan2(ys, xs)
				if rng > sc.MaxRange || math.Abs(brg) > sc.FOVDeg*math.Pi/360 || r.Float64() > sc.PDetect {
					continue
				}
				d := transport.Detection{Dim: len(sc.NoiseSD), Class: "yard_tractor"}
				switch sc.Kind {
				case "position_xy":
					d.Z = [3]float64{xs, ys}
				case "range_bearing_rate":
					d.Z = [3]float64{rng, brg, (dx*vx + dy*vy) / rng}
				}
				for i := range d.Dim {
					d.Z[i] += sc.NoiseSD[i] * r.NormFloat64()
				}
				m.Dets = append(m.Dets, d)
			}
			// The arrival time is the caller's clock; here 5 ms after measuring.
			if err := eng.Ingest(&m, tNs+5_000_000); err != nil {
				return err
			}
		}
		if eng.Advance(tNs, &out) && ms%1000 == 0 {
			fmt.Fprintf(w, "t=%2ds  %d tracks\n", ms/1000, len(out.Tracks))
		}
	}
	eng.Flush(&out)
	fmt.Fprintf(w, "final message seq %d at t_ns %d:\n", out.Seq, out.TNs)
	for _, tr := range out.Tracks {
		fmt.Fprintf(w, "  track %d %-9s %-12s pos (%6.1f, %6.1f) m  vel (%5.2f, %5.2f) m/s  hits %d\n",
			tr.ID, tr.Status, tr.Class, tr.Pos[0], tr.Pos[1], tr.Vel[0], tr.Vel[1], tr.Hits)
	}
	c := eng.Counters()
	fmt.Fprintf(w, "messages %d, detections %d, births %d, deletions %d, late dropped %d\n",
		c.Messages, c.Detections, c.Births, c.Deletions, c.LateDropped)
	return nil
}
