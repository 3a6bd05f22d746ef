package engine

import (
	"encoding/binary"
	"math"
	"testing"

	"github.com/godwit-fusion/godwit/transport"
)

// FuzzIngest drives the engine with arbitrary measurement messages decoded
// from the fuzzer's bytes: any sensor index, sequence, time step, arrival
// delay, dimension, values (NaN, ±Inf, huge) and covariances. The engine
// must never panic, must keep every output finite and within max_tracks,
// and must keep working after rejections.
func FuzzIngest(f *testing.F) {
	f.Add([]byte{0, 1, 10, 0, 2, 0, 0, 0, 0, 0, 0, 0x24, 0x40, 0, 0, 0, 0, 0, 0, 0x14, 0x40})
	f.Add([]byte{1, 2, 200, 3, 3, 0xff, 0xf0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 1, 1, 1, 1})
	f.Fuzz(fuzzIngestOnce)
}

func fuzzIngestOnce(t *testing.T, data []byte) {
	{
		cfg := baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2), rbrSensor("mast_radar", 1, 0, 0))
		cfg.Tracker.MaxTracks = 8
		cfg.Output.RateHz = 10
		e, err := New(cfg, Options{})
		if err != nil {
			t.Fatal(err)
		}
		var m transport.Measurement
		var out transport.TracksMsg
		tn := t0
		next := func(n int) []byte {
			if len(data) < n {
				data = data[len(data):]
				return nil
			}
			b := data[:n]
			data = data[n:]
			return b
		}
		f64 := func() float64 {
			b := next(8)
			if b == nil {
				return 0
			}
			v := math.Float64frombits(binary.LittleEndian.Uint64(b))
			if !math.IsNaN(v) && !math.IsInf(v, 0) {
				v = math.Mod(v, 1e3) // mostly plausible, sometimes not
			}
			return v
		}
		for len(data) >= 5 {
			h := next(5)
			m.SensorIdx = int(int8(h[0])) % 3
			m.Seq = uint64(h[1])
			tn += int64(h[2]) * 1e6
			delay := int64(h[3]) * 4e6
			nd := int(h[4] % 5)
			m.TNs = tn - delay
			m.Dets = m.Dets[:0]
			for k := 0; k < nd; k++ {
				d := transport.Detection{Dim: 2 + int(h[4]>>7)}
				for j := 0; j < d.Dim; j++ {
					d.Z[j] = f64()
				}
				if h[4]&0x40 != 0 {
					d.HasR = true
					for j := 0; j < d.Dim*d.Dim; j++ {
						d.R[j] = f64()
					}
				}
				m.Dets = append(m.Dets, d)
			}
			_ = e.Ingest(&m, tn)
			if h[3]&1 != 0 { // the caller's reports, at arbitrary moments
				e.ReportLoad(int(h[1]), 64, int64(h[2])*1e6)
				e.ReportBroker(h[3]&2 == 0)
				if h[3]&4 != 0 {
					e.ReportDropped(uint64(h[1] & 7))
				}
			}
			if e.Advance(tn, &out) {
				checkOut(t, &out, cfg.Tracker.MaxTracks)
			}
		}
		if e.Flush(&out) {
			checkOut(t, &out, cfg.Tracker.MaxTracks)
		}
		checkHealth(t, e, tn)
	}
}

// checkHealth: the health message encodes (every number finite), its state
// is one of the three and its alerts are sorted.
func checkHealth(t *testing.T, e *Engine, tn int64) {
	t.Helper()
	var h transport.HealthMsg
	e.Health(tn, &h)
	if _, err := transport.AppendHealth(nil, &h); err != nil {
		t.Fatalf("health does not encode: %v (%+v)", err, h)
	}
	if h.State != "ok" && h.State != "degraded" && h.State != "failed" {
		t.Fatalf("state %q", h.State)
	}
	for i := 1; i < len(h.Alerts); i++ {
		a, b := h.Alerts[i-1], h.Alerts[i]
		if a.Code > b.Code || (a.Code == b.Code && a.Sensor > b.Sensor) {
			t.Fatalf("alerts not sorted: %+v", h.Alerts)
		}
	}
}

func checkOut(t *testing.T, out *transport.TracksMsg, maxTracks int) {
	t.Helper()
	if len(out.Tracks) > maxTracks {
		t.Fatalf("%d tracks, max_tracks %d", len(out.Tracks), maxTracks)
	}
	for _, tr := range out.Tracks {
		for _, v := range append(append(tr.State[:len(tr.State):len(tr.State)], tr.StateCov...), tr.Pos[0], tr.Pos[1], tr.Vel[0], tr.Vel[1]) {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("non-finite output in track %d: %+v", tr.ID, tr)
			}
		}
	}
}
