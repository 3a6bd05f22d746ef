package report

import (
	"fmt"
	"html/template"
	"math"
	"strings"

	"github.com/godwit-fusion/godwit/runtime/eval"
)

type row struct{ Name, Value, Note string }

type page struct {
	Title, Generated string
	CSS              template.CSS
	Run              []Field

	Plan, GOSPA, NIS, Latency string

	Params   string
	Scores   []row
	Baseline [][]string
	NISRows  [][]string
	Confirm  [][]string
	Statuses string
}

func num(v eval.Num, unit string) string {
	f := float64(v)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return "—"
	}
	s := fmt.Sprintf("%.3g", f)
	if math.Abs(f) >= 1000 {
		s = fmt.Sprintf("%.0f", f)
	}
	if unit != "" {
		s += " " + unit
	}
	return s
}

func pct(v eval.Num) string {
	f := float64(v)
	if math.IsNaN(f) {
		return "—"
	}
	return fmt.Sprintf("%.0f %%", 100*f)
}

func (pg *page) fill(s *eval.Summary) {
	pr := s.Params
	pg.Statuses = strings.Join(pr.Statuses, ", ")
	pg.Params = fmt.Sprintf("GOSPA c = %g m, p = %g, α = %g; OSPA c = %g m; tracks matched to objects within %g m; truth aligned within %g ms",
		pr.C, pr.P, pr.Alpha, pr.OSPAC, pr.MatchDist, pr.TruthTolMS)
	if pr.MaxRange > 0 {
		pg.Params += fmt.Sprintf("; only objects and tracks within %g m of the ego", pr.MaxRange)
	}
	best := ""
	bestV := math.Inf(1)
	for _, b := range s.Baseline {
		if v := float64(b.Mean); v < bestV {
			best, bestV = b.Sensor, v
		}
	}
	g := s.GOSPA
	add := func(name, value, note string) { pg.Scores = append(pg.Scores, row{name, value, note}) }
	add("epochs scored", fmt.Sprint(s.Epochs), fmt.Sprintf("%d without truth nearby, %d out of order", s.EpochsSkipped, s.OutOfOrder))
	add("true objects / track ids", fmt.Sprintf("%d / %d", s.TruthObjects, s.TrackIDs), fmt.Sprintf("%d tracks ignored (non-finite position)", s.TracksIgnored))
	gnote := fmt.Sprintf("parts (m^%g): localisation %s, missed %s, false %s; on average %s missed, %s false per epoch",
		pr.P, num(g.Loc, ""), num(g.Missed, ""), num(g.False, ""), num(g.MissedCount, ""), num(g.FalseCount, ""))
	if best != "" {
		gnote += fmt.Sprintf("; best raw detections (%s): %s m", best, num(eval.Num(bestV), ""))
	}
	add("GOSPA mean", num(g.Mean, "m"), gnote)
	add("OSPA mean", num(s.OSPA, "m"), "")
	add("position RMSE", num(s.PositionRMSE, "m"), fmt.Sprintf("over %d matched pairs", s.MatchedPairs))
	add("NEES mean (position)", num(s.NEES.Mean, ""), fmt.Sprintf("expected 2; %s of %d epochs inside their 95%% interval", pct(s.NEES.InsideFraction), s.NEES.Epochs))
	add("id switches", fmt.Sprint(s.IDSwitches), "")
	add("fragmentations", fmt.Sprint(s.Fragmentations), "")
	add("time to confirm, mean", num(s.TimeToConfirm.Mean, "s"), fmt.Sprintf("%d objects confirmed, %d never", s.TimeToConfirm.Confirmed, s.TimeToConfirm.Never))
	if e := s.Ego; e != nil {
		add("ego position RMSE", num(e.PosRMSE, "m"), fmt.Sprintf("max %s, heading RMS %s, over %d epochs", num(e.PosMax, "m"), num(e.YawRMSDeg, "°"), e.Epochs))
	}
	if l := s.Latency; l != nil {
		add("latency p50 / p99", num(l.P50, "ms")+" / "+num(l.P99, "ms"), fmt.Sprintf("max %s over %d samples", num(l.Max, "ms"), l.Samples))
	}
	for _, b := range s.Baseline {
		pg.Baseline = append(pg.Baseline, []string{b.Sensor, fmt.Sprint(b.Scans), num(b.Mean, "m"), num(b.Loc, ""), num(b.Missed, ""), num(b.False, ""), num(b.OSPA, "m")})
	}
	for _, n := range s.NIS {
		pg.NISRows = append(pg.NISRows, []string{n.Sensor, fmt.Sprint(n.Dim), fmt.Sprint(n.Samples), num(n.Mean, ""), pct(n.InsideFraction)})
	}
	for _, o := range s.TimeToConfirm.Objects {
		v := "never"
		if !math.IsNaN(float64(o.Seconds)) {
			v = num(o.Seconds, "s")
		}
		pg.Confirm = append(pg.Confirm, []string{o.ID, v})
	}
}

const css = `
:root{--paper:#fbf8f1;--ink:#2b2a28;--faint:#e4dccb;--stone:#8a8478;--teal:#2a8c82;--brick:#c0503a}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);font:15px/1.5 "DejaVu Sans",Verdana,sans-serif}
header{padding:28px 40px 18px;border-bottom:3px solid var(--teal)}
header h1{margin:0;font-size:26px;letter-spacing:.02em}
header p{margin:4px 0 0;color:var(--stone)}
main{max-width:1000px;padding:10px 40px 60px}
h2{font-size:18px;margin:34px 0 8px;padding-left:10px;border-left:5px solid var(--brick)}
p.note{color:var(--stone);margin:4px 0 10px;font-size:13px}
table{border-collapse:collapse;width:100%;margin:6px 0 12px;font-size:14px}
th,td{text-align:left;padding:5px 10px;border-bottom:1px solid var(--faint);vertical-align:top}
th{font-weight:600;background:#f3ede0}
td.v{font-weight:600;white-space:nowrap;font-variant-numeric:tabular-nums}
td.n{color:var(--stone);font-size:13px}
img{display:block;max-width:100%;height:auto;border:1px solid var(--faint);background:var(--paper)}
.cols{display:flex;gap:24px;flex-wrap:wrap}.cols>div{flex:1 1 300px}
`

var pageTmpl = template.Must(template.New("page").Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{{.Title}}</title>
<style>{{.CSS}}</style>
</head>
<body>
<header>
<h1>{{.Title}}</h1>
{{if .Generated}}<p>{{.Generated}}</p>{{end}}
</header>
<main>
{{if .Run}}<h2>Run</h2>
<table>{{range .Run}}<tr><th>{{.Name}}</th><td>{{.Value}}</td></tr>{{end}}</table>{{end}}

<h2>Scores</h2>
<p class="note">{{.Params}}. Tracks that count: {{.Statuses}}.</p>
<table>
<tr><th>metric</th><th>value</th><th>detail</th></tr>
{{range .Scores}}<tr><td>{{.Name}}</td><td class="v">{{.Value}}</td><td class="n">{{.Note}}</td></tr>
{{end}}</table>

<h2>Plan view</h2>
<p class="note">True object paths dashed, the platform's own path as a wide pale band, tracks in one colour per id, with their 2-σ position ellipses (Mahalanobis distance 2) at intervals.</p>
<img src="{{.Plan}}" alt="plan view of truth and track paths">

<h2>GOSPA over time</h2>
{{if .GOSPA}}<p class="note">Top: the GOSPA and OSPA distances. Bottom: GOSPA's parts in its p-th power, stacked; they add up to GOSPA^p at every epoch.</p>
<img src="{{.GOSPA}}" alt="GOSPA over time by component">
{{else}}<p class="note">No epochs were scored.</p>{{end}}

{{if .Baseline}}<h3>Raw detections as a baseline</h3>
<table><tr><th>sensor</th><th>scans</th><th>GOSPA mean</th><th>localisation</th><th>missed</th><th>false</th><th>OSPA mean</th></tr>
{{range .Baseline}}<tr>{{range .}}<td>{{.}}</td>{{end}}</tr>{{end}}</table>{{end}}

<h2>NIS per sensor</h2>
{{if .NIS}}<p class="note">Normalised innovation squared against the two-sided 95% interval of its average (chi-square, Bar-Shalom, Li &amp; Kirubarajan 2001).</p>
<img src="{{.NIS}}" alt="NIS over time per sensor">
<table><tr><th>sensor</th><th>m</th><th>samples</th><th>mean</th><th>inside 95%</th></tr>
{{range .NISRows}}<tr>{{range .}}<td>{{.}}</td>{{end}}</tr>{{end}}</table>
{{else}}<p class="note">No NIS samples were given.</p>{{end}}

<h2>Latency</h2>
{{if .Latency}}<img src="{{.Latency}}" alt="latency histogram">
{{else}}<p class="note">No latency samples were given.</p>{{end}}

{{if .Confirm}}<h2>Time to confirm</h2>
<p class="note">From the first epoch an object is scored at to the first at which a confirmed track is matched to it.</p>
<table><tr><th>object</th><th>time to confirm</th></tr>
{{range .Confirm}}<tr>{{range .}}<td>{{.}}</td>{{end}}</tr>{{end}}</table>{{end}}
</main>
</body>
</html>
`))
