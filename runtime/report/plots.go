package report

import (
	"fmt"
	"image/color"
	"math"

	"github.com/godwit-fusion/godwit/runtime/eval"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

type xy = plotter.XY

// pathSet gathers polylines (runs of consecutive samples) per id, in order
// of first appearance.
type pathSet struct {
	order []string
	runs  map[string][][]xy
	last  map[string]int
}

func newPathSet() *pathSet { return &pathSet{runs: map[string][][]xy{}, last: map[string]int{}} }

// add appends p to id's path at sample index k; a gap in k starts a new run.
func (s *pathSet) add(id string, k int, p xy) {
	r, seen := s.runs[id]
	if !seen {
		s.order = append(s.order, id)
	}
	if !seen || s.last[id] != k-1 {
		r = append(r, nil)
	}
	r[len(r)-1] = append(r[len(r)-1], p)
	s.runs[id] = r
	s.last[id] = k
}

func (s *pathSet) bounds(b *box) {
	for _, id := range s.order {
		for _, run := range s.runs[id] {
			for _, p := range run {
				b.add(p.X, p.Y)
			}
		}
	}
}

// fixedPoint reports whether every point of the set is the same one (a
// fixed platform's truth), and which.
func (s *pathSet) fixedPoint() (xy, bool) {
	var first xy
	n := 0
	for _, id := range s.order {
		for _, run := range s.runs[id] {
			for _, p := range run {
				if n == 0 {
					first = p
				} else if math.Abs(p.X-first.X) > 1e-6 || math.Abs(p.Y-first.Y) > 1e-6 {
					return xy{}, false
				}
				n++
			}
		}
	}
	return first, n > 0
}

type box struct{ x0, x1, y0, y1 float64 }

func newBox() box { return box{math.Inf(1), math.Inf(-1), math.Inf(1), math.Inf(-1)} }

func (b *box) add(x, y float64) {
	b.x0, b.x1 = math.Min(b.x0, x), math.Max(b.x1, x)
	b.y0, b.y1 = math.Min(b.y0, y), math.Max(b.y1, y)
}

// ellipse2σ is the 2-σ contour (Mahalanobis distance 2, which holds 86% of
// a planar Gaussian: 1 − e^{−2}) of a 2×2 position covariance around c, from
// its eigen-decomposition; false when the covariance is not positive definite.
func ellipse2σ(c [2]float64, P [4]float64) (plotter.XYs, bool) {
	a, b, d := P[0], (P[1]+P[2])/2, P[3]
	m, r := (a+d)/2, math.Hypot((a-d)/2, b)
	l1, l2 := m+r, m-r
	if !(l2 > 0) || math.IsInf(l1, 0) {
		return nil, false
	}
	th := 0.5 * math.Atan2(2*b, a-d)
	ct, st := math.Cos(th), math.Sin(th)
	s1, s2 := 2*math.Sqrt(l1), 2*math.Sqrt(l2)
	const n = 40
	pts := make(plotter.XYs, n+1)
	for i := 0; i <= n; i++ {
		u := 2 * math.Pi * float64(i) / n
		ex, ey := s1*math.Cos(u), s2*math.Sin(u)
		pts[i] = xy{X: c[0] + ct*ex - st*ey, Y: c[1] + st*ex + ct*ey}
	}
	return pts, true
}

func (r *renderer) planView() (*plot.Plot, error) {
	p := newPlot("Plan view: truth and tracks (site frame)", "east (m)", "north (m)")
	p.Legend.Left = true
	truth, ego := newPathSet(), newPathSet()
	for k := range r.in.Truth {
		tl := &r.in.Truth[k]
		for _, o := range tl.Objects {
			truth.add(o.ID, k, xy{X: o.Pos[0], Y: o.Pos[1]})
		}
		if tl.Ego != nil {
			ego.add("ego", k, xy{X: tl.Ego.Pos[0], Y: tl.Ego.Pos[1]})
		}
	}
	tracks := newPathSet()
	var ellipses []plotter.XYs
	var ellColour []int
	nextEll := map[string]int64{}
	colour := map[string]int{}
	every := r.in.EllipseEvery.Nanoseconds()
	if every <= 0 {
		every = 1e9
	}
	for k := range r.in.Tracks {
		m := &r.in.Tracks[k]
		for i := range m.Tracks {
			t := &m.Tracks[i]
			if !r.counted[t.Status] || !finite(t.Pos[0]) || !finite(t.Pos[1]) {
				continue
			}
			id := fmt.Sprint(t.ID)
			if _, ok := colour[id]; !ok {
				colour[id] = len(colour) % len(palette)
				nextEll[id] = m.TNs
			}
			tracks.add(id, k, xy{X: t.Pos[0], Y: t.Pos[1]})
			if m.TNs >= nextEll[id] {
				if e, ok := ellipse2σ(t.Pos, t.PosCov); ok {
					ellipses = append(ellipses, e)
					ellColour = append(ellColour, colour[id])
				}
				nextEll[id] = m.TNs + every
			}
		}
	}
	b := newBox()
	truth.bounds(&b)
	ego.bounds(&b)
	tracks.bounds(&b)
	if math.IsInf(b.x0, 0) {
		b = box{-10, 10, -10, 10}
	}
	b.y1 += 0.1 * math.Max(b.y1-b.y0, 10) // room for the legend above the paths
	equalAspect(p, b, 8.1, 7.1)

	var err error
	legendTruth, legendTrack := false, false
	if post, fixed := ego.fixedPoint(); fixed {
		sc, err := plotter.NewScatter(plotter.XYs{post})
		if err != nil {
			return nil, err
		}
		sc.GlyphStyle = draw.GlyphStyle{Color: ink, Radius: vg.Points(4), Shape: draw.BoxGlyph{}}
		p.Add(sc)
		p.Legend.Add("platform (fixed)", sc)
	} else {
		for _, id := range ego.order {
			for _, run := range ego.runs[id] {
				if err = addLine(p, run, lineStyle(faint, 7, false), ""); err != nil {
					return nil, err
				}
			}
			if err = addLine(p, nil, lineStyle(faint, 7, false), "ego path (truth)"); err != nil {
				return nil, err
			}
		}
	}
	for _, id := range truth.order {
		for _, run := range truth.runs[id] {
			name := ""
			if !legendTruth {
				name, legendTruth = "true object path", true
			}
			if err = addLine(p, run, lineStyle(stone, 1.4, true), name); err != nil {
				return nil, err
			}
		}
	}
	for _, id := range tracks.order {
		c := palette[colour[id]]
		for _, run := range tracks.runs[id] {
			name := ""
			if !legendTrack {
				name, legendTrack = "track (a colour per id)", true
			}
			if err = addLine(p, run, lineStyle(c, 1.6, false), name); err != nil {
				return nil, err
			}
		}
	}
	for i, e := range ellipses {
		name := ""
		if i == 0 {
			name = "2-σ position ellipse"
		}
		if err = addLine(p, e, lineStyle(palette[ellColour[i]], 0.8, false), name); err != nil {
			return nil, err
		}
	}
	// Object names at the start of each true path.
	var lab plotter.XYLabels
	for _, id := range truth.order {
		first := truth.runs[id][0][0]
		lab.XYs = append(lab.XYs, first)
		lab.Labels = append(lab.Labels, id)
	}
	if len(lab.Labels) > 0 && len(lab.Labels) <= 60 {
		l, err := plotter.NewLabels(lab)
		if err != nil {
			return nil, err
		}
		for i := range l.TextStyle {
			l.TextStyle[i].Color = ink
			l.TextStyle[i].Font.Size = vg.Points(8)
			l.TextStyle[i].XAlign = -0.5
			l.TextStyle[i].YAlign = 0.3
		}
		p.Add(l)
	}
	return p, nil
}

// equalAspect sets the axis ranges so that a metre is as long east as north
// on a data area of about w×h inches.
func equalAspect(p *plot.Plot, b box, w, h float64) {
	pad := 0.04 * math.Max(b.x1-b.x0, b.y1-b.y0)
	pad = math.Max(pad, 2)
	b.x0, b.x1, b.y0, b.y1 = b.x0-pad, b.x1+pad, b.y0-pad, b.y1+pad
	s := math.Max((b.x1-b.x0)/w, (b.y1-b.y0)/h)
	cx, cy := (b.x0+b.x1)/2, (b.y0+b.y1)/2
	p.X.Min, p.X.Max = cx-s*w/2, cx+s*w/2
	p.Y.Min, p.Y.Max = cy-s*h/2, cy+s*h/2
}

// addLine adds a polyline; with no points it only adds a legend entry.
func addLine(p *plot.Plot, pts []xy, ls draw.LineStyle, legend string) error {
	if len(pts) == 0 {
		if legend != "" {
			l := &plotter.Line{LineStyle: ls}
			p.Legend.Add(legend, l)
		}
		return nil
	}
	l, err := plotter.NewLine(plotter.XYs(pts))
	if err != nil {
		return err
	}
	l.LineStyle = ls
	p.Add(l)
	if legend != "" {
		p.Legend.Add(legend, l)
	}
	return nil
}

func (r *renderer) secs(tNs int64) float64 { return float64(tNs-r.t0) / 1e9 }

// gospaPlots: the distance and OSPA over time, and the p-th power parts of
// GOSPA stacked (they sum to GOSPA^p at every epoch, α = 2).
func (r *renderer) gospaPlots() ([]*plot.Plot, error) {
	eps := r.in.Epochs
	pw := r.p
	top := newPlot("GOSPA and OSPA over time", "", "distance (m)")
	g, o := make(plotter.XYs, len(eps)), make(plotter.XYs, len(eps))
	for i, e := range eps {
		t := r.secs(e.TNs)
		g[i], o[i] = xy{X: t, Y: e.GOSPA}, xy{X: t, Y: e.OSPA}
	}
	if err := addLine(top, g, lineStyle(teal, 1.4, false), fmt.Sprintf("GOSPA (c = %g m, p = %g, α = 2)", r.c, pw)); err != nil {
		return nil, err
	}
	if err := addLine(top, o, lineStyle(stone, 1, true), "OSPA"); err != nil {
		return nil, err
	}
	top.Y.Min = 0

	bot := newPlot("", "time (s)", fmt.Sprintf("GOSPA^%g parts (m^%g)", pw, pw))
	bot.Y.Min = 0
	parts := []struct {
		name string
		c    color.RGBA
		v    func(e *eval.Epoch) float64
	}{
		{"localisation", teal, func(e *eval.Epoch) float64 { return e.Loc }},
		{"missed objects", brick, func(e *eval.Epoch) float64 { return e.MissTerm }},
		{"false tracks", ochre, func(e *eval.Epoch) float64 { return e.FalseTerm }},
	}
	lower := make([]float64, len(eps))
	for _, part := range parts {
		ring := make(plotter.XYs, 0, 2*len(eps))
		upper := make([]float64, len(eps))
		for i := range eps {
			upper[i] = lower[i] + part.v(&eps[i])
			ring = append(ring, xy{X: r.secs(eps[i].TNs), Y: upper[i]})
		}
		for i := len(eps) - 1; i >= 0; i-- {
			ring = append(ring, xy{X: r.secs(eps[i].TNs), Y: lower[i]})
		}
		poly, err := plotter.NewPolygon(ring)
		if err != nil {
			return nil, err
		}
		poly.Color = color.NRGBA{R: part.c.R, G: part.c.G, B: part.c.B, A: 0xc0} // not premultiplied
		poly.LineStyle = lineStyle(part.c, 0.3, false)
		bot.Add(poly)
		bot.Legend.Add(part.name, poly)
		lower = upper
	}
	return []*plot.Plot{top, bot}, nil
}

// nisPlots: one panel per sensor, the NIS samples against the two-sided 95%
// interval of their averaging (Bar-Shalom, Li & Kirubarajan 2001, §5.4.2).
func (r *renderer) nisPlots() ([]*plot.Plot, error) {
	var rows []*plot.Plot
	// One time axis for every panel, so that they line up.
	tmin, tmax := math.Inf(1), math.Inf(-1)
	for _, s := range r.in.NIS {
		for _, q := range s.Points {
			tmin, tmax = math.Min(tmin, r.secs(q.TNs)), math.Max(tmax, r.secs(q.TNs))
		}
	}
	if !(tmax > tmin) {
		tmin, tmax = tmin-1, tmin+1
	}
	for i, s := range r.in.NIS {
		xl := ""
		if i == len(r.in.NIS)-1 {
			xl = "time (s)"
		}
		p := newPlot(fmt.Sprintf("NIS of %s (m = %d)", s.Sensor, s.Dim), xl, "NIS")
		n := len(s.Points)
		pts, out := make(plotter.XYs, 0, n), make(plotter.XYs, 0)
		lo, hi := make(plotter.XYs, n), make(plotter.XYs, n)
		ymax := 0.0
		for k, q := range s.Points {
			l, h := eval.ChiSquareBounds(s.Dim, q.N)
			t := r.secs(q.TNs)
			lo[k], hi[k] = xy{X: t, Y: l}, xy{X: t, Y: h}
			ymax = math.Max(ymax, h)
		}
		// Outliers beyond 3× the widest upper bound are drawn at the top,
		// as triangles, so they do not flatten the rest.
		clip := 3 * math.Max(ymax, float64(s.Dim))
		top := 0.0
		for _, q := range s.Points {
			t := r.secs(q.TNs)
			if q.Mean > clip {
				out = append(out, xy{X: t, Y: clip})
				top = clip
				continue
			}
			pts = append(pts, xy{X: t, Y: q.Mean})
			top = math.Max(top, q.Mean)
		}
		p.X.Min, p.X.Max = tmin, tmax
		p.Y.Min, p.Y.Max = 0, 1.05*math.Max(top, math.Max(ymax, float64(s.Dim)))
		// The legend once, on the first panel, with room above the data.
		legend := func(name string) string {
			if i == 0 {
				return name
			}
			return ""
		}
		if i == 0 {
			p.Y.Max *= 1.4
		}
		if err := addLine(p, lo, lineStyle(brick, 1, true), legend("95% interval")); err != nil {
			return nil, err
		}
		if err := addLine(p, hi, lineStyle(brick, 1, true), ""); err != nil {
			return nil, err
		}
		if n > 0 {
			expect := plotter.XYs{{X: lo[0].X, Y: float64(s.Dim)}, {X: lo[n-1].X, Y: float64(s.Dim)}}
			if err := addLine(p, expect, lineStyle(stone, 0.8, false), legend("expected value m")); err != nil {
				return nil, err
			}
		}
		if len(pts) > 0 {
			sc, err := plotter.NewScatter(pts)
			if err != nil {
				return nil, err
			}
			sc.GlyphStyle = draw.GlyphStyle{Color: teal, Radius: vg.Points(1.6), Shape: draw.CircleGlyph{}}
			p.Add(sc)
			if i == 0 {
				p.Legend.Add("NIS (average over each sample's updates)", sc)
			}
		}
		if len(out) > 0 {
			sc, err := plotter.NewScatter(out)
			if err != nil {
				return nil, err
			}
			sc.GlyphStyle = draw.GlyphStyle{Color: brick, Radius: vg.Points(2.5), Shape: draw.TriangleGlyph{}}
			p.Add(sc)
			p.Legend.Add("beyond the axis", sc) // on any panel: it explains a glyph seen only there
		}
		rows = append(rows, p)
	}
	return rows, nil
}

// latencyPlot is a histogram of the latency samples with p50 and p99 marked.
func (r *renderer) latencyPlot() (*plot.Plot, error) {
	sorted := sortedCopy(r.in.Latency)
	p := newPlot("Latency", "latency (ms)", "samples")
	// A long tail would squeeze the body of the histogram into one bin:
	// the axis ends at twice the p99, and the samples beyond are counted
	// in the legend.
	p50, p99 := eval.Quantile(sorted, 0.5), eval.Quantile(sorted, 0.99)
	limit := sorted[len(sorted)-1]
	if limit > 2*p99 && p99 > 0 {
		limit = 2 * p99
	}
	shown := sorted
	for len(shown) > 0 && shown[len(shown)-1] > limit {
		shown = shown[:len(shown)-1]
	}
	bins := max(5, min(int(math.Sqrt(float64(len(shown)))), 40))
	h, err := plotter.NewHist(plotter.Values(shown), bins)
	if err != nil {
		return nil, err
	}
	h.FillColor = teal
	h.LineStyle = lineStyle(paper, 0.5, false)
	p.Add(h)
	peak := 0.0
	for _, b := range h.Bins {
		peak = math.Max(peak, b.Weight)
	}
	for _, q := range []struct {
		name string
		x    float64
		c    color.RGBA
	}{{"p50", p50, ink}, {"p99", p99, brick}} {
		if err := addLine(p, plotter.XYs{{X: q.x, Y: 0}, {X: q.x, Y: peak * 1.05}}, lineStyle(q.c, 1.2, true),
			fmt.Sprintf("%s %.3g ms", q.name, q.x)); err != nil {
			return nil, err
		}
	}
	if k := len(sorted) - len(shown); k > 0 {
		if err := addLine(p, nil, lineStyle(paper, 0, false),
			fmt.Sprintf("%d beyond %.3g ms (max %.3g ms)", k, limit, sorted[len(sorted)-1])); err != nil {
			return nil, err
		}
	}
	p.Y.Min = 0
	return p, nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
