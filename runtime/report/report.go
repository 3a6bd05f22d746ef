// Package report writes the evaluation of a run as a self-contained HTML
// page: report.html with its PNG plots beside it (made with gonum/plot),
// referenced by relative name, CSS inline, no external URL. The page shows
// a plan view of truth and track paths with 2-σ position ellipses, GOSPA
// over time by component, NIS per sensor against its chi-square bounds, a
// latency histogram and the summary tables.
//
// The output is a pure function of the Input: nothing reads the clock, maps
// are never iterated into the page, and the same input gives the same bytes
// (a timestamp appears only when the caller passes one in Input.Generated).
package report

import (
	"bytes"
	"errors"
	"fmt"
	"html/template"
	"math"
	"os"
	"path/filepath"
	"sort"
	"time"

	"github.com/godwit-fusion/godwit/runtime/eval"
	"github.com/godwit-fusion/godwit/transport"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
)

// Input is everything the page shows.
type Input struct {
	Title     string // "" means "godwit evaluation"
	Generated string // shown under the title when not empty (e.g. a time the caller chooses)
	Run       []Field

	Summary *eval.Summary // required
	Epochs  []eval.Epoch
	NIS     []eval.NISSeries
	Latency []float64 // ms

	Truth  []eval.TruthLine
	Tracks []transport.TracksMsg
	// EllipseEvery is the interval between a track's 2-σ ellipses on the
	// plan view; 0 means 1 s.
	EllipseEvery time.Duration
}

// Field is one extra row of the "Run" table (counters the caller has,
// e.g. messages replayed, alerts raised), shown in the order given.
type Field struct{ Name, Value string }

// FromEvaluator fills an Input from an Evaluator and the data it scored.
func FromEvaluator(e *eval.Evaluator, truth []eval.TruthLine, tracks []transport.TracksMsg) *Input {
	return &Input{Summary: e.Summary(), Epochs: e.Epochs(), NIS: e.NIS(), Latency: e.Latencies(),
		Truth: truth, Tracks: tracks}
}

// File names the report writes in its folder.
const (
	PageFile    = "report.html"
	PlanFile    = "plan.png"
	GOSPAFile   = "gospa.png"
	NISFile     = "nis.png"
	LatencyFile = "latency.png"
)

// ErrNoSummary means Input.Summary is nil.
var ErrNoSummary = errors.New("report: no summary")

type renderer struct {
	in      *Input
	counted map[string]bool
	t0      int64
	c, p    float64
}

// Write renders the report into dir (created when missing) and returns the
// names of the files it wrote, the page last. Plots without data (no NIS
// samples, no latency samples, no epochs) are left out and the page says so.
func Write(dir string, in *Input) ([]string, error) {
	if in == nil || in.Summary == nil {
		return nil, ErrNoSummary
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	r := &renderer{in: in, counted: map[string]bool{}, c: in.Summary.Params.C, p: in.Summary.Params.P}
	for _, s := range in.Summary.Params.Statuses {
		r.counted[s] = true
	}
	r.t0 = firstTime(in)

	pg := page{Title: in.Title, Generated: in.Generated, Run: in.Run, CSS: template.CSS(css)}
	if pg.Title == "" {
		pg.Title = "godwit evaluation"
	}
	var files []string
	save := func(name string, rows []*plot.Plot, w, h vg.Length) error {
		b, err := renderPNG(rows, w, h)
		if err != nil {
			return fmt.Errorf("report: %s: %w", name, err)
		}
		if err := os.WriteFile(filepath.Join(dir, name), b, 0o644); err != nil {
			return err
		}
		files = append(files, name)
		return nil
	}

	plan, err := r.planView()
	if err != nil {
		return nil, err
	}
	if err := save(PlanFile, []*plot.Plot{plan}, 9*vg.Inch, 8*vg.Inch); err != nil {
		return nil, err
	}
	pg.Plan = PlanFile
	if len(in.Epochs) > 0 {
		rows, err := r.gospaPlots()
		if err != nil {
			return nil, err
		}
		if err := save(GOSPAFile, rows, 9*vg.Inch, 6*vg.Inch); err != nil {
			return nil, err
		}
		pg.GOSPA = GOSPAFile
	}
	if len(in.NIS) > 0 {
		rows, err := r.nisPlots()
		if err != nil {
			return nil, err
		}
		h := vg.Length(len(rows))*2.3*vg.Inch + 0.4*vg.Inch
		if err := save(NISFile, rows, 9*vg.Inch, h); err != nil {
			return nil, err
		}
		pg.NIS = NISFile
	}
	if len(in.Latency) > 0 {
		p, err := r.latencyPlot()
		if err != nil {
			return nil, err
		}
		if err := save(LatencyFile, []*plot.Plot{p}, 9*vg.Inch, 4*vg.Inch); err != nil {
			return nil, err
		}
		pg.Latency = LatencyFile
	}
	pg.fill(in.Summary)

	var buf bytes.Buffer
	if err := pageTmpl.Execute(&buf, &pg); err != nil {
		return nil, fmt.Errorf("report: page: %w", err)
	}
	if err := os.WriteFile(filepath.Join(dir, PageFile), buf.Bytes(), 0o644); err != nil {
		return nil, err
	}
	return append(files, PageFile), nil
}

// firstTime is t = 0 of the time axes: the earliest epoch, truth line or
// tracks message.
func firstTime(in *Input) int64 {
	t := int64(math.MaxInt64)
	if len(in.Epochs) > 0 {
		t = min(t, in.Epochs[0].TNs)
	}
	if len(in.Truth) > 0 {
		t = min(t, in.Truth[0].TNs)
	}
	if len(in.Tracks) > 0 {
		t = min(t, in.Tracks[0].TNs)
	}
	for _, s := range in.NIS {
		if len(s.Points) > 0 {
			t = min(t, s.Points[0].TNs)
		}
	}
	if t == math.MaxInt64 {
		return 0
	}
	return t
}

func sortedCopy(v []float64) []float64 {
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	return s
}
