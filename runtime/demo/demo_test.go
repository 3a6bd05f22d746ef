package demo

import (
	"bytes"
	"context"
	"encoding/json"
	"github.com/godwit-fusion/godwit/runtime/testlock"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"

	"go.uber.org/goleak"
)

// NEES band for the end-to-end runs: the mean position NEES of matched
// pairs must lie within [0.5, 8], a factor of 4 either side of its expected
// value 2 (the dimension; Bar-Shalom, Li & Kirubarajan 2001, §5.4.2). This
// is a documented engineering band, far looser than the chi-square interval
// of the pair count (±0.1 around 2 for thousands of pairs): the matched-pair
// NEES of a multi-target run also carries the CTRV model's mismatch where
// pedestrians turn back at the ends of their paths and the cyclist takes its
// corners, and matching within the cut-off biases it low. A value outside
// the band means a broken covariance (units, a frame error, a lost
// square root), which is what this check is for. The report prints the
// fraction of epochs inside their own chi-square interval beside it.
const neesLo, neesHi = 0.5, 8.0

// End to end over the embedded broker: a shortened campus-shuttle scene
// (15 s at 6× real time, 2.5 s of wall time) through the real daemon over MQTT.
func TestDemoEndToEnd(t *testing.T) {
	testlock.Exclusive(t) // live and timed: not beside another package's flood
	defer goleak.VerifyNone(t)
	dir := t.TempDir()
	res, err := Run(context.Background(), Options{Out: dir, Seconds: 15, Speed: 6})
	if err != nil {
		t.Fatal(err)
	}
	s := res.Scored.Summary
	if res.PublishFailed != 0 || res.Published == 0 || res.Daemon.Pipeline.Accepted == 0 {
		t.Fatalf("published %d (%d failed), daemon accepted %d", res.Published, res.PublishFailed, res.Daemon.Pipeline.Accepted)
	}
	// At 20 Hz of wall time for 2.5 s of playback the daemon publishes about
	// 50 messages (fewer when it falls behind, as under the race detector);
	// the tracks are stamped in scene time, so they must all be scored
	// against the truth once the offset is taken off.
	if res.TracksMsgs < 10 || s.Epochs < res.TracksMsgs-2 {
		t.Errorf("%d tracks messages received, %d scored (%d without truth, %d out of order)",
			res.TracksMsgs, s.Epochs, s.EpochsSkipped, s.OutOfOrder)
	}
	name, best := res.Scored.BestBaseline()
	g := float64(s.GOSPA.Mean)
	t.Logf("GOSPA %.3g (raw %s %.3g), NEES %.3g, RMSE %.3g m, confirmed %d, latency %+v",
		g, name, best, float64(s.NEES.Mean), float64(s.PositionRMSE), res.Daemon.Pipeline.Confirmed, s.Latency)
	// The point of fusing: the tracks beat the best single sensor's raw
	// detections on GOSPA (same c, p, α, same truth epochs).
	if !(g < best) {
		t.Errorf("tracks GOSPA %.3g m, best raw detections (%s) %.3g m: tracks must be lower", g, name, best)
	}
	if n := float64(s.NEES.Mean); !(n >= neesLo && n <= neesHi) {
		t.Errorf("NEES mean %.3g outside [%g, %g]", n, neesLo, neesHi)
	}
	if res.Daemon.Pipeline.Confirmed == 0 || s.Latency == nil || s.Latency.Samples == 0 {
		t.Errorf("confirmed %d, latency %+v", res.Daemon.Pipeline.Confirmed, s.Latency)
	}
	checkReportDir(t, dir, res.Files)

	var sum struct {
		Demo       map[string]any `json:"demo"`
		Evaluation struct {
			Epochs int `json:"epochs"`
		} `json:"evaluation"`
	}
	b, err := os.ReadFile(filepath.Join(dir, "summary.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &sum); err != nil || sum.Evaluation.Epochs != s.Epochs || sum.Demo["scenario"] != "campus-shuttle" {
		t.Errorf("summary.json: %v %+v", err, sum)
	}
}

var refAttr = regexp.MustCompile(`(?i)(?:src|href)\s*=\s*["']([^"']*)["']|url\(\s*["']?([^"')]*)`)

// checkReportDir: every file listed exists, every PNG decodes as PNG, and
// the page refers to nothing but files the run wrote beside it (no URL, no
// absolute path).
func checkReportDir(t *testing.T, dir string, files []string) {
	t.Helper()
	page := ""
	for _, f := range files {
		b, err := os.ReadFile(filepath.Join(dir, f))
		if err != nil {
			t.Fatal(err)
		}
		switch {
		case strings.HasSuffix(f, ".png"):
			if _, err := png.Decode(bytes.NewReader(b)); err != nil {
				t.Errorf("%s is not a valid PNG: %v", f, err)
			}
		case f == "report.html":
			page = string(b)
		}
	}
	if page == "" {
		t.Fatalf("no report.html among %v", files)
	}
	refs := 0
	for _, m := range refAttr.FindAllStringSubmatch(page, -1) {
		ref := m[1] + m[2]
		if ref == "" || strings.HasPrefix(ref, "#") {
			continue
		}
		refs++
		if !slices.Contains(files, ref) {
			t.Errorf("the page refers to %q, not a file it wrote (%v)", ref, files)
		}
	}
	if refs == 0 {
		t.Error("the page refers to no plot")
	}
	if strings.Contains(page, "http://") || strings.Contains(page, "https://") {
		t.Error("the page contains a URL")
	}
}

func TestRunRejectsBadOptions(t *testing.T) {
	for _, o := range []Options{{Seconds: -1}, {Speed: -2}, {Speed: math.NaN()}, {Scenario: "no-such-scene"}} {
		o.Out = t.TempDir()
		if _, err := Run(context.Background(), o); err == nil {
			t.Errorf("%+v: no error", o)
		}
	}
}
