package daemon

import (
	"bytes"
	"context"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
)

// Any bytes as a recording: Replay returns a summary or an error, never
// panics, and twice over the same bytes gives the same output. The seed
// corpus (testdata/fuzz/FuzzReplay) holds a short clean recording, a dirty
// one (every reason code but too_large) and broken headers.
func FuzzReplay(f *testing.F) {
	cfg := dockPost(f)
	msgs := gatesim.Gate(cfg, 400*time.Millisecond, 1)
	f.Add(gatesim.Recording(msgs))
	dirty, _ := gatesim.DirtyRecording(cfg, msgs, 2)
	// Without the 32 KiB too_large line: inputs that big slow the fuzzer's
	// mutator to a crawl, and the decoder's own fuzz test covers size.
	var small [][]byte
	for _, line := range bytes.SplitAfter(dirty, []byte("\n")) {
		if len(line) < 4096 {
			small = append(small, line)
		}
	}
	f.Add(bytes.Join(small, nil))
	f.Add([]byte(`{"godwit_recording":1,"created":"2030-01-01T00:00:00Z","note":""}` + "\n" +
		`{"rx_ns":1900000000010000000,"topic":"dock-post-2/sensors/gate_lidar","qos":1,"retain":false,"payload":{"v":1,"sensor":"gate_lidar","seq":1,"t_ns":1900000000000000000,"dets":[{"z":[3,1]}]}}` + "\n"))
	f.Add([]byte("not a recording\n{}\n"))
	f.Fuzz(func(t *testing.T, rec []byte) {
		run := func() ([]byte, *Summary, error) {
			var tb bytes.Buffer
			s, err := Replay(context.Background(), cfg, bytes.NewReader(rec), ReplayOutput{Tracks: &tb}, ReplayOptions{})
			return tb.Bytes(), s, err
		}
		a, s1, err1 := run()
		b, s2, err2 := run()
		if (err1 == nil) != (err2 == nil) || !bytes.Equal(a, b) {
			t.Fatalf("two replays of the same bytes differ: %v / %v", err1, err2)
		}
		if err1 == nil && s1.String() != s2.String() {
			t.Fatalf("summaries differ:\n%s\n%s", s1, s2)
		}
	})
}
