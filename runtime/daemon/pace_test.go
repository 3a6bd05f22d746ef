package daemon

import (
	"context"
	"testing"
	"time"
)

// The pace a replay keeps: recorded spacing over speed, a pause longer than
// maxCatchUpNs counted as maxCatchUpNs, time going backwards as no time.
// A cancelled context makes wait return at once, so nothing here sleeps.
func TestPacerDue(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	p := pacer{speed: 2}
	t0 := time.Unix(1900000000, 0)
	rx := int64(1900000000000000000)
	p.start(rx, t0)
	steps := []struct {
		rx      int64
		elapsed int64
	}{
		{rx + 100e6, 100e6},                         // 100 ms later
		{rx + 50e6, 100e6},                          // out of order: no time
		{rx + 100e6 + 3600e9, 100e6 + maxCatchUpNs}, // an hour's pause, cut short
		{rx + 200e6 + 3600e9, 200e6 + maxCatchUpNs}, // spacing resumes
	}
	for i, s := range steps {
		if err := p.wait(ctx, s.rx); err != context.Canceled {
			t.Fatalf("step %d: wait returned %v, want context.Canceled", i, err)
		}
		if p.elapsedNs != s.elapsed {
			t.Errorf("step %d: %d ns of recorded time, want %d", i, p.elapsedNs, s.elapsed)
		}
	}
	if err := (&pacer{}).wait(ctx, rx); err != nil {
		t.Errorf("speed 0 paces nothing, got %v", err)
	}
}
