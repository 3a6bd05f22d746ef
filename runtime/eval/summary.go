package eval

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"strings"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// Num is a float64 that marshals NaN and ±Inf as JSON null (a metric with
// no samples is undefined, not 0).
type Num float64

// MarshalJSON writes the shortest decimal that reads back to the same
// float64, or null.
func (n Num) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, f, 'g', -1, 64), nil
}

// UnmarshalJSON reads a number, or null as NaN.
func (n *Num) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*n = Num(math.NaN())
		return nil
	}
	var f float64
	if err := json.Unmarshal(b, &f); err != nil {
		return err
	}
	*n = Num(f)
	return nil
}

// Summary is the whole evaluation, marshalled as summary.json. The JSON
// keys come in the order of the fields below, which is part of the format:
// parameters first, then the set metrics (GOSPA, OSPA), then matched-pair
// metrics (RMSE, NEES), track continuity (id switches, fragmentations, time
// to confirm), ego, the raw-detection baseline, NIS and latency. Undefined
// values (no samples) are null.
type Summary struct {
	Params Params `json:"params"`

	Epochs        int `json:"epochs"`         // tracks messages scored
	EpochsSkipped int `json:"epochs_skipped"` // tracks messages with no truth within the tolerance
	OutOfOrder    int `json:"out_of_order"`   // tracks messages refused for going back in time
	TracksIgnored int `json:"tracks_ignored"` // counted tracks left out for a non-finite position
	TruthObjects  int `json:"truth_objects"`  // distinct true objects scored
	TrackIDs      int `json:"track_ids"`      // distinct track ids that counted

	GOSPA SetMetric `json:"gospa"`
	OSPA  Num       `json:"ospa_mean"` // mean over epochs, m

	MatchedPairs int `json:"matched_pairs"` // track–truth pairs over all epochs
	PositionRMSE Num `json:"position_rmse"` // √(mean squared position error of the pairs), m

	NEES NEES `json:"nees"`

	IDSwitches     int       `json:"id_switches"`
	Fragmentations int       `json:"fragmentations"`
	TimeToConfirm  ConfirmAt `json:"time_to_confirm"`

	Ego *EgoError `json:"ego"` // null without ego estimate and truth

	Baseline []SensorGOSPA `json:"baseline"` // raw detections per sensor, in first-seen order
	NIS      []SensorNIS   `json:"nis"`      // per sensor, in first-seen order
	Latency  *Latency      `json:"latency"`  // null without samples

	BadSamples int `json:"bad_samples"` // latency and NIS samples refused
}

// Params are the options the metrics were computed with.
type Params struct {
	C          float64  `json:"c"`
	P          float64  `json:"p"`
	Alpha      float64  `json:"alpha"`
	OSPAC      float64  `json:"ospa_c"`
	MatchDist  float64  `json:"match_dist"`
	Statuses   []string `json:"statuses"`
	TruthTolMS float64  `json:"truth_tol_ms"`
	MaxRange   float64  `json:"max_range"` // 0: no limit
}

// SetMetric is GOSPA averaged over epochs. Loc, Missed and False are the
// means of the p-th power parts (Distance^p = Loc + Missed + False at every
// epoch); MissedCount and FalseCount the mean numbers of missed objects and
// false tracks.
type SetMetric struct {
	Mean        Num `json:"mean"` // mean GOSPA distance, m
	Loc         Num `json:"localisation"`
	Missed      Num `json:"missed"`
	False       Num `json:"false"`
	MissedCount Num `json:"missed_count"`
	FalseCount  Num `json:"false_count"`
}

// NEES is the position NEES of matched pairs (dimension 2). Mean is over all
// pairs; an epoch's average over its N pairs is inside when it lies in the
// two-sided 95% interval of χ²(2N)/N (Bar-Shalom, Li & Kirubarajan 2001,
// §5.4.2, with the pairs of an epoch in place of Monte Carlo runs).
// Matching within MatchDist leaves out gross errors, so the mean is biased
// low when tracks are poor.
type NEES struct {
	Mean           Num `json:"mean"`
	Pairs          int `json:"pairs"`
	Epochs         int `json:"epochs"` // epochs with at least one pair
	InsideFraction Num `json:"inside_95"`
}

// ConfirmAt lists the time to confirm of every true object.
type ConfirmAt struct {
	Mean      Num             `json:"mean_s"` // over the confirmed objects
	Confirmed int             `json:"confirmed"`
	Never     int             `json:"never"`
	Objects   []ObjectConfirm `json:"objects"` // in first-scored order
}

// ObjectConfirm is one true object's time to confirm.
type ObjectConfirm struct {
	ID      string `json:"id"`
	FirstNs int64  `json:"first_t_ns"`
	Seconds Num    `json:"seconds"` // null when never confirmed
}

// EgoError is the platform's own estimate against its truth.
type EgoError struct {
	Epochs    int `json:"epochs"`
	PosRMSE   Num `json:"pos_rmse"` // m
	PosMax    Num `json:"pos_max"`  // m
	YawRMSDeg Num `json:"yaw_rms_deg"`
}

// SensorGOSPA is the raw-detection baseline of one sensor: the scans' mean
// GOSPA and its parts, as in SetMetric.
type SensorGOSPA struct {
	Sensor  string `json:"sensor"`
	Scans   int    `json:"scans"`
	Skipped int    `json:"skipped"` // no truth within the tolerance
	Mean    Num    `json:"mean"`
	Loc     Num    `json:"localisation"`
	Missed  Num    `json:"missed"`
	False   Num    `json:"false"`
	OSPA    Num    `json:"ospa_mean"`
}

// SensorNIS sums up one sensor's NIS samples against their 95% bounds.
type SensorNIS struct {
	Sensor         string `json:"sensor"`
	Dim            int    `json:"dim"`
	Samples        int    `json:"samples"`
	Mean           Num    `json:"mean"` // of the sample means (≈ dim when consistent)
	InsideFraction Num    `json:"inside_95"`
}

// Latency is the distribution of the latency samples, ms. Quantiles are the
// empirical ones (the smallest sample with at least the fraction of the
// samples at or below it; gonum stat.Quantile, stat.Empirical).
type Latency struct {
	Samples int `json:"samples"`
	P50     Num `json:"p50_ms"`
	P99     Num `json:"p99_ms"`
	Max     Num `json:"max_ms"`
}

// Summary sums up everything fed so far.
func (e *Evaluator) Summary() *Summary {
	o := e.opt
	s := &Summary{
		Params: Params{C: o.C, P: o.P, Alpha: o.Alpha, OSPAC: o.OSPAC, MatchDist: o.MatchDist,
			Statuses: append([]string(nil), o.Statuses...), TruthTolMS: float64(o.TruthTolNs) / 1e6, MaxRange: o.MaxRange},
		Epochs: len(e.epochs), EpochsSkipped: e.skipped, OutOfOrder: e.outOfOrder,
		TracksIgnored: e.ignored, TruthObjects: len(e.objOrder), TrackIDs: len(e.trackIDs),
		MatchedPairs: e.pairs, IDSwitches: e.idSwitches, Fragmentations: e.fragments,
		BadSamples: e.badSample,
		Baseline:   []SensorGOSPA{}, NIS: []SensorNIS{},
	}
	var g, loc, miss, fls, mc, fc, ospa float64
	for i := range e.epochs {
		ep := &e.epochs[i]
		g += ep.GOSPA
		loc += ep.Loc
		miss += ep.MissTerm
		fls += ep.FalseTerm
		mc += float64(ep.Missed)
		fc += float64(ep.False)
		ospa += ep.OSPA
	}
	n := float64(len(e.epochs))
	s.GOSPA = SetMetric{Mean: div(g, n), Loc: div(loc, n), Missed: div(miss, n), False: div(fls, n),
		MissedCount: div(mc, n), FalseCount: div(fc, n)}
	s.OSPA = div(ospa, n)
	s.PositionRMSE = Num(math.Sqrt(float64(div(e.sqErr, float64(e.pairs)))))
	s.NEES = NEES{Mean: div(e.neesSum, float64(e.neesN)), Pairs: e.neesN, Epochs: e.neesEpochs,
		InsideFraction: div(float64(e.neesInside), float64(e.neesEpochs))}

	s.TimeToConfirm.Objects = make([]ObjectConfirm, 0, len(e.objOrder))
	var tc float64
	for _, st := range e.objOrder {
		oc := ObjectConfirm{ID: st.id, FirstNs: st.firstNs, Seconds: Num(math.NaN())}
		if st.confirmNs >= 0 {
			oc.Seconds = Num(float64(st.confirmNs-st.firstNs) / 1e9)
			tc += float64(oc.Seconds)
			s.TimeToConfirm.Confirmed++
		} else {
			s.TimeToConfirm.Never++
		}
		s.TimeToConfirm.Objects = append(s.TimeToConfirm.Objects, oc)
	}
	s.TimeToConfirm.Mean = div(tc, float64(s.TimeToConfirm.Confirmed))

	if e.egoN > 0 {
		en := float64(e.egoN)
		s.Ego = &EgoError{Epochs: e.egoN, PosRMSE: Num(math.Sqrt(e.egoSq / en)), PosMax: Num(e.egoMax),
			YawRMSDeg: Num(math.Sqrt(e.egoYawSq/en) * 180 / math.Pi)}
	}
	for _, name := range e.baseOrder {
		b := e.base[name]
		k := float64(b.scans)
		s.Baseline = append(s.Baseline, SensorGOSPA{Sensor: name, Scans: b.scans, Skipped: b.skipped,
			Mean: div(b.gospa, k), Loc: div(b.loc, k), Missed: div(b.miss, k), False: div(b.fls, k), OSPA: div(b.ospa, k)})
	}
	for _, name := range e.nisOrder {
		ns := e.nis[name]
		var sum float64
		inside := 0
		for _, p := range ns.Points {
			sum += p.Mean
			lo, hi := ChiSquareBounds(ns.Dim, p.N)
			if p.Mean >= lo && p.Mean <= hi {
				inside++
			}
		}
		k := float64(len(ns.Points))
		s.NIS = append(s.NIS, SensorNIS{Sensor: name, Dim: ns.Dim, Samples: len(ns.Points),
			Mean: div(sum, k), InsideFraction: div(float64(inside), k)})
	}
	if len(e.latency) > 0 {
		v := sortedCopy(e.latency)
		s.Latency = &Latency{Samples: len(v), P50: Num(Quantile(v, 0.5)), P99: Num(Quantile(v, 0.99)), Max: Num(v[len(v)-1])}
	}
	return s
}

// JSON is summary.json: indented, keys in field order, a final newline.
func (s *Summary) JSON() ([]byte, error) {
	b, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		return nil, err
	}
	return append(b, '\n'), nil
}

// Quantile is the empirical p-quantile of sorted (ascending) samples.
func Quantile(sorted []float64, p float64) float64 {
	if len(sorted) == 0 {
		return math.NaN()
	}
	return stat.Quantile(p, stat.Empirical, sorted, nil)
}

// ChiSquareBounds is the two-sided 95% interval of the mean of n
// independent χ²(dim) values, [χ²_{0.025}(n·dim), χ²_{0.975}(n·dim)]/n
// (Bar-Shalom, Li & Kirubarajan 2001, §5.4.2).
func ChiSquareBounds(dim, n int) (lo, hi float64) {
	k := dim * n
	if k <= 0 {
		return math.NaN(), math.NaN()
	}
	c := distuv.ChiSquared{K: float64(k)}
	l, h := c.Quantile(0.025), c.Quantile(0.975)
	return l / float64(n), h / float64(n)
}

func div(a, b float64) Num {
	if b == 0 {
		return Num(math.NaN())
	}
	return Num(a / b)
}

// String is the summary as a short text table for a terminal (the demo and
// replay commands print it); "—" marks an undefined value.
func (s *Summary) String() string {
	var b strings.Builder
	row := func(name, value string) { fmt.Fprintf(&b, "%-22s %s\n", name, value) }
	g := s.GOSPA
	row("epochs scored", fmt.Sprintf("%d (%d without truth, %d out of order)", s.Epochs, s.EpochsSkipped, s.OutOfOrder))
	row("objects / track ids", fmt.Sprintf("%d / %d", s.TruthObjects, s.TrackIDs))
	row("GOSPA mean", fmt.Sprintf("%s m  (parts, m^%g: localisation %s, missed %s, false %s)",
		g.Mean.text(), s.Params.P, g.Loc.text(), g.Missed.text(), g.False.text()))
	for _, bl := range s.Baseline {
		row("  raw "+bl.Sensor, bl.Mean.text()+" m")
	}
	row("OSPA mean", s.OSPA.text()+" m")
	row("position RMSE", fmt.Sprintf("%s m over %d pairs", s.PositionRMSE.text(), s.MatchedPairs))
	row("NEES mean", fmt.Sprintf("%s (expected 2; %s of epochs inside 95%%)", s.NEES.Mean.text(), s.NEES.InsideFraction.percent()))
	row("id switches / frags", fmt.Sprintf("%d / %d", s.IDSwitches, s.Fragmentations))
	row("time to confirm", fmt.Sprintf("%s s mean (%d confirmed, %d never)", s.TimeToConfirm.Mean.text(), s.TimeToConfirm.Confirmed, s.TimeToConfirm.Never))
	if e := s.Ego; e != nil {
		row("ego position RMSE", fmt.Sprintf("%s m (max %s m, heading %s°)", e.PosRMSE.text(), e.PosMax.text(), e.YawRMSDeg.text()))
	}
	if l := s.Latency; l != nil {
		row("latency p50 / p99", fmt.Sprintf("%s / %s ms (%d samples)", l.P50.text(), l.P99.text(), l.Samples))
	}
	return b.String()
}

func (n Num) text() string {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return "—"
	}
	return strconv.FormatFloat(f, 'g', 3, 64)
}

func (n Num) percent() string {
	f := float64(n)
	if math.IsNaN(f) {
		return "—"
	}
	return strconv.FormatFloat(100*f, 'f', 0, 64) + "%"
}
