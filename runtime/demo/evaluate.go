package demo

import (
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/eval"
	"github.com/godwit-fusion/godwit/runtime/report"
	"github.com/godwit-fusion/godwit/transport"
)

// Scored is a run scored against its truth.
type Scored struct {
	Eval    *eval.Evaluator
	Summary *eval.Summary
	Extras  Extras
	Truth   []eval.TruthLine
	Tracks  []transport.TracksMsg
}

// ScoreOptions say where the extra samples come from.
type ScoreOptions struct {
	Eval eval.Options
	// RecordedLatency adds the records' own ingest-to-publish wait as the
	// latency samples (replay); off when the caller has measured latency
	// itself (LatencyMS).
	RecordedLatency bool
	LatencyMS       []float64
}

// Score scores tracks against truth, with the raw-detection baseline and
// the per-sensor NIS taken from the records the tracks were made from.
func Score(cfg *configs.Config, truth []eval.TruthLine, tracks []transport.TracksMsg, recs []Record, opt ScoreOptions) (*Scored, error) {
	ev, err := eval.Score(truth, tracks, opt.Eval)
	if err != nil {
		return nil, err
	}
	s := &Scored{Eval: ev, Truth: truth, Tracks: tracks}
	if err := AddBaseline(ev, cfg, truth, recs, &s.Extras); err != nil {
		return nil, err
	}
	if err := AddNISAndLatency(ev, cfg, recs, opt.RecordedLatency, &s.Extras); err != nil {
		return nil, err
	}
	for _, ms := range opt.LatencyMS {
		if ev.AddLatency(ms) == nil {
			s.Extras.LatencySamples++
		}
	}
	s.Summary = ev.Summary()
	return s, nil
}

// BestBaseline is the lowest mean raw-detection GOSPA over the sensors and
// its sensor ("" and NaN without any baseline).
func (s *Scored) BestBaseline() (string, float64) {
	name, best := "", math.NaN()
	for _, b := range s.Summary.Baseline {
		if v := float64(b.Mean); !math.IsNaN(v) && (math.IsNaN(best) || v < best) {
			name, best = b.Sensor, v
		}
	}
	return name, best
}

// WriteReport writes the HTML report with its plots into dir and returns
// the files written (the page last).
func (s *Scored) WriteReport(dir, title string, run []report.Field) ([]string, error) {
	in := report.FromEvaluator(s.Eval, s.Truth, s.Tracks)
	in.Title = title
	in.Run = run
	return report.Write(dir, in)
}

// Figures are the headline numbers the commands print.
type Figures struct {
	TracksConfirmed uint64
	Alerts          []string // distinct alerts raised, "code sensor"
}

// PrintTable writes the summary table: one figure a line, the unit beside
// it, undefined figures as "–".
func (s *Scored) PrintTable(w io.Writer, f Figures) {
	sum := s.Summary
	row := func(name, format string, a ...any) {
		fmt.Fprintf(w, "  %-26s "+format+"\n", append([]any{name}, a...)...)
	}
	p := sum.Params
	row("tracks confirmed", "%d", f.TracksConfirmed)
	row("epochs scored", "%d (truth objects %d, track ids %d)", sum.Epochs, sum.TruthObjects, sum.TrackIDs)
	row(fmt.Sprintf("GOSPA mean (c=%g, p=%g)", p.C, p.P), "%s m", num(sum.GOSPA.Mean))
	row("  localisation part", "%s m²", num(sum.GOSPA.Loc))
	row("  missed part", "%s m²  (%s objects on average)", num(sum.GOSPA.Missed), num(sum.GOSPA.MissedCount))
	row("  false part", "%s m²  (%s tracks on average)", num(sum.GOSPA.False), num(sum.GOSPA.FalseCount))
	if name, best := s.BestBaseline(); name != "" {
		row("raw detections GOSPA", "%s m  (best sensor: %s)", num(eval.Num(best)), name)
	}
	row("OSPA mean", "%s m", num(sum.OSPA))
	row("position RMSE", "%s m  (%d matched pairs)", num(sum.PositionRMSE), sum.MatchedPairs)
	row("NEES mean (dim 2)", "%s  (expected 2; %s of epochs inside their 95%% interval)",
		num(sum.NEES.Mean), pct(sum.NEES.InsideFraction))
	row("id switches / fragments", "%d / %d", sum.IDSwitches, sum.Fragmentations)
	if sum.Ego != nil {
		row("ego position RMSE", "%s m", num(sum.Ego.PosRMSE))
	}
	if l := sum.Latency; l != nil {
		row("latency p50 / p99", "%s / %s ms  (%d samples)", num(l.P50), num(l.P99), l.Samples)
	} else {
		row("latency p50 / p99", "–")
	}
	alerts := "none"
	if len(f.Alerts) > 0 {
		alerts = fmt.Sprintf("%d: %s", len(f.Alerts), strings.Join(f.Alerts, ", "))
	}
	row("alerts raised", "%s", alerts)
}

func num(v eval.Num) string {
	x := float64(v)
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return "–"
	}
	return fmt.Sprintf("%.3g", x)
}

func pct(v eval.Num) string {
	x := float64(v)
	if math.IsNaN(x) {
		return "–"
	}
	return fmt.Sprintf("%.0f%%", 100*x)
}
