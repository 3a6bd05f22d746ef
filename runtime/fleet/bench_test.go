package fleet

import (
	"fmt"
	"testing"
)

// BenchmarkHandleHealth is the cost of one live health message: decode,
// validate, diff the alerts, update the vehicle (the DESIGN.md example).
func BenchmarkHandleHealth(b *testing.B) {
	s := NewStore(StoreConfig{})
	msg := []byte(designExample)
	b.SetBytes(int64(len(msg)))
	b.ReportAllocs()
	at := t0
	for b.Loop() {
		at++
		if err := s.Handle("godwit/shuttle-07/health", msg, false, at); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkSnapshot1000 is the cost of /api/vehicles (and an SSE client's
// first event) for a fleet of 1000 vehicles.
func BenchmarkSnapshot1000(b *testing.B) {
	s := NewStore(StoreConfig{})
	for i := 0; i < 1000; i++ {
		id := fmt.Sprintf("shuttle-%04d", i)
		if err := s.Handle("godwit/"+id+"/health", healthMsg(b, id, 1, "ok"), false, t0); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportAllocs()
	for b.Loop() {
		if snap := s.Changes(0, t0); len(snap.Vehicles) != 1000 {
			b.Fatal(len(snap.Vehicles))
		}
	}
}

// BenchmarkSweep1000 is one silence sweep over 1000 vehicles, none silent.
func BenchmarkSweep1000(b *testing.B) {
	s := NewStore(StoreConfig{})
	for i := 0; i < 1000; i++ {
		id := fmt.Sprintf("shuttle-%04d", i)
		if err := s.Handle("godwit/"+id+"/health", healthMsg(b, id, 1, "ok"), false, t0); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportAllocs()
	for b.Loop() {
		s.Sweep(t0 + 1)
	}
}
