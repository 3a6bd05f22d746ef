package report

import (
	"bytes"
	"errors"
	"fmt"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"testing"

	"github.com/godwit-fusion/godwit/runtime/eval"
	"github.com/godwit-fusion/godwit/transport"
	"gonum.org/v1/gonum/mat"
	"pgregory.net/rapid"
)

func fmtUint(v uint64) string { return fmt.Sprint(v) }

var refRE = regexp.MustCompile(`(?i)(?:src|href)\s*=\s*"([^"]*)"`)

// checkReport: every PNG decodes (image/png) at a sensible size, the page
// references only files the report wrote, by relative name, and nothing
// outside the folder or on the network.
func checkReport(t *testing.T, dir string, files []string) {
	t.Helper()
	wrote := map[string]bool{}
	for _, f := range files {
		wrote[f] = true
	}
	if files[len(files)-1] != PageFile {
		t.Fatalf("files %v: want the page last", files)
	}
	for _, f := range files {
		if !strings.HasSuffix(f, ".png") {
			continue
		}
		b, err := os.ReadFile(filepath.Join(dir, f))
		if err != nil {
			t.Fatal(err)
		}
		img, err := png.Decode(bytes.NewReader(b))
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		sz := img.Bounds().Size()
		if sz.X < 400 || sz.Y < 200 || sz.X > 4000 || sz.Y > 4000 {
			t.Errorf("%s: %v px, want between 400×200 and 4000×4000", f, sz)
		}
	}
	page, err := os.ReadFile(filepath.Join(dir, PageFile))
	if err != nil {
		t.Fatal(err)
	}
	refs := refRE.FindAllSubmatch(page, -1)
	if len(refs) == 0 {
		t.Fatal("page references no image")
	}
	for _, m := range refs {
		ref := string(m[1])
		if !wrote[ref] || strings.ContainsAny(ref, "/\\:") {
			t.Errorf("page references %q, which the report did not write beside it", ref)
		}
	}
	if bytes.Contains(page, []byte("http://")) || bytes.Contains(page, []byte("https://")) || bytes.Contains(page, []byte("url(")) {
		t.Error("page refers to something outside its folder")
	}
	entries, _ := os.ReadDir(dir)
	for _, e := range entries {
		if !wrote[e.Name()] && strings.HasSuffix(e.Name(), ".png") {
			t.Errorf("stray file %s", e.Name())
		}
	}
}

// synthetic is a small made-up scene: one object walking east, a track a
// little off it, two sensors' NIS, latency samples.
func synthetic(t testing.TB) *Input {
	t.Helper()
	const t0 = int64(1_772_438_400_000_000_000)
	var truth []eval.TruthLine
	var tracks []transport.TracksMsg
	for k := int64(0); k <= 40; k++ {
		tn := t0 + k*100e6
		x := 1.4 * float64(k) / 10
		truth = append(truth, eval.TruthLine{TNs: tn, Objects: []eval.TruthObject{{ID: "p1", Pos: [2]float64{x, 2}, Vel: [2]float64{1.4, 0}}},
			Ego: &eval.TruthEgo{}})
		m := transport.TracksMsg{V: 1, TNs: tn, Frame: "site"}
		if k >= 3 {
			m.Tracks = []transport.Track{{ID: 7, Status: "confirmed", Pos: [2]float64{x + 0.1*math.Sin(float64(k)), 2.05},
				PosCov: [4]float64{0.04, 0.01, 0.01, 0.02}}}
		}
		tracks = append(tracks, m)
	}
	ev, err := eval.New(truth, eval.Options{})
	if err != nil {
		t.Fatal(err)
	}
	for i := range tracks {
		if err := ev.AddTracks(&tracks[i]); err != nil {
			t.Fatal(err)
		}
	}
	for k := int64(0); k < 40; k++ {
		_ = ev.AddNIS("front_radar", 3, eval.NISPoint{TNs: t0 + k*100e6, Mean: 3 + math.Sin(float64(k)), N: 1 + int(k)})
		_ = ev.AddNIS("roof_lidar", 2, eval.NISPoint{TNs: t0 + k*100e6, Mean: 2 + 40*float64(k%17/16), N: 64})
		_ = ev.AddLatency(1 + float64(k%7)*0.3)
	}
	_ = ev.AddDetections("roof_lidar", t0, [][2]float64{{0.3, 2}, {20, 20}})
	in := FromEvaluator(ev, truth, tracks)
	in.Run = []Field{{"scenario", "synthetic walk"}}
	return in
}

func TestWriteSynthetic(t *testing.T) {
	dir := t.TempDir()
	files, err := Write(dir, synthetic(t))
	if err != nil {
		t.Fatal(err)
	}
	want := []string{PlanFile, GOSPAFile, NISFile, LatencyFile, PageFile}
	if strings.Join(files, ",") != strings.Join(want, ",") {
		t.Errorf("files %v, want %v", files, want)
	}
	checkReport(t, dir, files)
	page, _ := os.ReadFile(filepath.Join(dir, PageFile))
	for _, s := range []string{"synthetic walk", "GOSPA mean", "front_radar", "roof_lidar", "p1", "confirmed, coasting"} {
		if !bytes.Contains(page, []byte(s)) {
			t.Errorf("page lacks %q", s)
		}
	}
}

// The same input gives the same bytes, file for file.
func TestDeterministic(t *testing.T) {
	in := synthetic(t)
	a, b := t.TempDir(), t.TempDir()
	fa, err := Write(a, in)
	if err != nil {
		t.Fatal(err)
	}
	fb, err := Write(b, in)
	if err != nil {
		t.Fatal(err)
	}
	sort.Strings(fa)
	sort.Strings(fb)
	if strings.Join(fa, ",") != strings.Join(fb, ",") {
		t.Fatalf("%v vs %v", fa, fb)
	}
	for _, f := range fa {
		x, _ := os.ReadFile(filepath.Join(a, f))
		y, _ := os.ReadFile(filepath.Join(b, f))
		if !bytes.Equal(x, y) {
			t.Errorf("%s differs between two renders", f)
		}
	}
}

// Without epochs, NIS or latency the plots are left out, the page says so
// and references only what exists.
func TestWriteEmpty(t *testing.T) {
	ev, err := eval.New(nil, eval.Options{})
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	files, err := Write(dir, FromEvaluator(ev, nil, nil))
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(files, ",") != PlanFile+","+PageFile {
		t.Errorf("files %v", files)
	}
	checkReport(t, dir, files)
	page, _ := os.ReadFile(filepath.Join(dir, PageFile))
	if !bytes.Contains(page, []byte("No NIS samples")) || !bytes.Contains(page, []byte("No latency samples")) {
		t.Error("page does not say what is missing")
	}
	if _, err := Write(dir, &Input{}); !errors.Is(err, ErrNoSummary) {
		t.Errorf("no summary: %v", err)
	}
}

// The 2-σ ellipse of P = diag(4, 1) has semi-axes 2·√4 = 4 and 2·√1 = 2;
// P = [2.5 1.5; 1.5 2.5] has eigenvalues 4 and 1 along the diagonals, so its
// major semi-axis (4) points at 45° (eigen-decomposition by hand).
func TestEllipse(t *testing.T) {
	e, ok := ellipse2σ([2]float64{10, 20}, [4]float64{4, 0, 0, 1})
	if !ok {
		t.Fatal("not drawn")
	}
	var mx, my float64
	for _, p := range e {
		mx, my = math.Max(mx, math.Abs(p.X-10)), math.Max(my, math.Abs(p.Y-20))
	}
	if math.Abs(mx-4) > 1e-12 || math.Abs(my-2) > 1e-2 {
		t.Errorf("semi-axes %v %v, want 4 and 2", mx, my)
	}
	e, _ = ellipse2σ([2]float64{0, 0}, [4]float64{2.5, 1.5, 1.5, 2.5})
	if p := e[0]; math.Abs(p.X-4/math.Sqrt2) > 1e-12 || math.Abs(p.Y-4/math.Sqrt2) > 1e-12 {
		t.Errorf("major axis end %v, want (2.83, 2.83)", p)
	}
	for _, P := range [][4]float64{{1, 2, 2, 1}, {0, 0, 0, 0}, {math.NaN(), 0, 0, 1}, {math.Inf(1), 0, 0, 1}} {
		if _, ok := ellipse2σ([2]float64{}, P); ok {
			t.Errorf("%v: drawn, want refused (not positive definite)", P)
		}
	}
}

// Every point of the drawn 2-σ ellipse lies at Mahalanobis distance 2:
// (p − c)ᵀP⁻¹(p − c) = 4, with P⁻¹ from gonum (mat.Dense.Inverse).
func TestEllipseContour(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		a := rapid.Float64Range(0.01, 30).Draw(rt, "a")
		d := rapid.Float64Range(0.01, 30).Draw(rt, "d")
		b := rapid.Float64Range(-0.95, 0.95).Draw(rt, "rho") * math.Sqrt(a*d)
		c := [2]float64{rapid.Float64Range(-100, 100).Draw(rt, "cx"), rapid.Float64Range(-100, 100).Draw(rt, "cy")}
		pts, ok := ellipse2σ(c, [4]float64{a, b, b, d})
		if !ok {
			rt.Fatal("positive definite covariance refused")
		}
		var inv mat.Dense
		if err := inv.Inverse(mat.NewDense(2, 2, []float64{a, b, b, d})); err != nil {
			rt.Skip(err)
		}
		for _, p := range pts {
			e := mat.NewVecDense(2, []float64{p.X - c[0], p.Y - c[1]})
			var w mat.VecDense
			w.MulVec(&inv, e)
			if m2 := mat.Dot(e, &w); math.Abs(m2-4) > 1e-6*4 {
				rt.Fatalf("point %v at Mahalanobis² %v, want 4", p, m2)
			}
		}
	})
}
