package daemon

import (
	"context"
	"errors"
	"fmt"
	"io"
	"sort"
	"strings"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
	"go.uber.org/zap"
)

// ReplayOptions tune Replay.
type ReplayOptions struct {
	// Speed paces the replay by the recorded arrival times: 1 is real time,
	// 2 twice as fast. 0 (the default) runs as fast as possible. Pacing
	// never changes the output: the engine sees only recorded times.
	Speed float64
	// Engine overrides engine choices (tests).
	Engine engine.Options
	// Logger receives rejected messages (rate-limited) and malformed lines.
	Logger *zap.Logger
}

// ReplayOutput is where Replay writes: one message a line, byte for byte
// what the daemon would publish.
type ReplayOutput struct {
	Tracks io.Writer
	Health io.Writer
}

// Summary is what a replay did (written as OUT/summary.json).
type Summary struct {
	Records         int               `json:"records"`         // recording entries read
	MalformedLines  int               `json:"malformed_lines"` // lines the reader could not parse (skipped)
	BadArrival      int               `json:"bad_arrival"`     // entries with rx_ns outside 1970..2116 (skipped)
	OtherTopic      uint64            `json:"other_topic"`     // entries on no sensor's topic (ignored, as live)
	Messages        uint64            `json:"messages"`        // measurement messages offered to the decoder
	Accepted        uint64            `json:"accepted"`
	Rejected        map[string]uint64 `json:"rejected"` // by reason code
	LateDropped     uint64            `json:"late_dropped"`
	Rewinds         uint64            `json:"rewinds"`
	TracksMessages  uint64            `json:"tracks_messages"`
	HealthMessages  uint64            `json:"health_messages"`
	TracksConfirmed uint64            `json:"tracks_confirmed"` // distinct ids confirmed at some output
	FinalTracks     int               `json:"final_tracks"`     // tracks in the final message
	FinalTNs        int64             `json:"final_t_ns"`       // its stamp: the latest measurement time
	FirstRxNs       int64             `json:"first_rx_ns"`
	LastRxNs        int64             `json:"last_rx_ns"`
	Births          uint64            `json:"births"`
	Deletions       uint64            `json:"deletions"`
	FilterErrors    uint64            `json:"filter_errors"`
	NonFinite       uint64            `json:"non_finite_outputs"`
	Interrupted     bool              `json:"interrupted,omitempty"`
}

// String is the short summary the replay command prints.
func (s *Summary) String() string {
	var b strings.Builder
	fmt.Fprintf(&b, "%d messages (%d accepted), rejected: %s, late-dropped %d, malformed lines %d\n",
		s.Messages, s.Accepted, describeCounts(s.Rejected), s.LateDropped, s.MalformedLines)
	fmt.Fprintf(&b, "%d tracks messages, %d tracks confirmed, %d in the final message at t_ns %d",
		s.TracksMessages, s.TracksConfirmed, s.FinalTracks, s.FinalTNs)
	if s.Interrupted {
		b.WriteString(" (interrupted)")
	}
	if s.OtherTopic > 0 || s.BadArrival > 0 {
		fmt.Fprintf(&b, "\nignored: %d entries on topics no configured sensor uses, %d with an implausible rx_ns",
			s.OtherTopic, s.BadArrival)
	}
	return b.String()
}

func describeCounts(m map[string]uint64) string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	if len(keys) == 0 {
		return "none"
	}
	sort.Strings(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = fmt.Sprintf("%s %d", k, m[k])
	}
	return strings.Join(parts, ", ")
}

// healthPeriodNs is the health cadence, live (retained topic) and in replay.
const healthPeriodNs = int64(time.Second)

// maxRxNs bounds a recorded arrival time (year 2116): beyond it, or at or
// before the Unix epoch, an entry is skipped as broken, which also keeps
// the clock arithmetic far from int64 overflow.
const maxRxNs = int64(1) << 62

// maxCatchUpNs bounds how much silence the replay fills with periodic
// output: after a longer gap in a recording (a paused bench, a stitched
// file) the clock jumps instead of writing thousands of empty messages.
const maxCatchUpNs = int64(10 * time.Second)

// Replay feeds a recording through the pipeline with the recorded arrival
// times as the only clock, writes tracks and health lines to out, and at the
// end of input one final tracks message stamped at the latest measurement
// time: the newest t_ns of any measurement-shaped payload in the recording
// (see measurementTNs), accepted or not, since that is the time the
// recording reached. Periodic output (output.rate_hz) falls on the multiples of the period
// in recorded time, exactly where the daemon's clock would put it, so the
// same recording always gives the same bytes. Cancelling ctx stops reading;
// the final message and the summary are still produced.
func Replay(ctx context.Context, cfg *configs.Config, rec io.Reader, out ReplayOutput, opt ReplayOptions) (*Summary, error) {
	log := opt.Logger
	if log == nil {
		log = zap.NewNop()
	}
	p, err := NewPipeline(cfg, opt.Engine, log)
	if err != nil {
		return nil, err
	}
	rr := transport.NewRecordReader(rec, 0)
	sum := &Summary{}
	period := p.RatePeriodNs()

	var (
		r          transport.Record
		started    bool
		clock      int64 // newest arrival time so far
		nextTick   int64
		nextHealth int64
		pace       = pacer{speed: opt.Speed}
		latestTNs  int64 // newest measurement time in the recording
		haveLatest bool
	)
	write := func(w io.Writer, b []byte) error {
		if w == nil {
			return nil
		}
		b = append(b, '\n')
		_, err := w.Write(b)
		return err
	}
	// advanceTo runs the periodic outputs due up to and including t.
	advanceTo := func(t int64) error {
		if period > 0 {
			if t-nextTick > maxCatchUpNs {
				nextTick = ceilMultiple(t-maxCatchUpNs, period)
			}
			for ; nextTick <= t; nextTick += period {
				if b, ok := p.Advance(nextTick); ok {
					if err := write(out.Tracks, b); err != nil {
						return err
					}
				}
			}
		}
		if t-nextHealth > maxCatchUpNs {
			nextHealth = ceilMultiple(t-maxCatchUpNs, healthPeriodNs)
		}
		for ; nextHealth <= t; nextHealth += healthPeriodNs {
			if err := write(out.Health, p.Health(nextHealth, nil)); err != nil {
				return err
			}
		}
		return nil
	}

	for {
		err := nextRecord(ctx, rr, &r, log)
		if err == io.EOF {
			break
		}
		if err != nil && err == ctx.Err() {
			sum.Interrupted = true
			break
		}
		if err != nil {
			return nil, err
		}
		// Every measurement-shaped payload counts for the final stamp, as
		// the v1 checker counts it: rejected ones, other topics, skipped
		// arrival times included.
		if t, ok := measurementTNs(r.Payload); ok && (!haveLatest || t > latestTNs) {
			latestTNs, haveLatest = t, true
		}
		if r.RxNs <= 0 || r.RxNs > maxRxNs {
			sum.BadArrival++
			log.Warn("recording entry with an implausible rx_ns skipped", zap.Int("line", r.Line), zap.Int64("rx_ns", r.RxNs))
			continue
		}
		if !started {
			started = true
			clock = r.RxNs
			pace.start(r.RxNs, time.Now())
			nextTick = ceilMultiple(r.RxNs, max(period, 1))
			nextHealth = ceilMultiple(r.RxNs, healthPeriodNs)
			sum.FirstRxNs = r.RxNs
		}
		if err := pace.wait(ctx, r.RxNs); err != nil {
			sum.Interrupted = true
			break
		}
		if r.RxNs > clock {
			clock = r.RxNs
		}
		// Outputs due before this message arrived come first.
		if err := advanceTo(clock); err != nil {
			return nil, err
		}
		if err := p.Handle(r.Topic, r.Payload, r.RxNs); err == nil && p.PerScan() {
			if b, ok := p.Advance(clock); ok {
				if err := write(out.Tracks, b); err != nil {
					return nil, err
				}
			}
		}
	}
	final := p.Flush
	if haveLatest {
		final = func() ([]byte, bool) { return p.FlushAt(latestTNs) }
	}
	if b, ok := final(); ok {
		if err := write(out.Tracks, b); err != nil {
			return nil, err
		}
		sum.FinalTracks = len(p.LastTracks().Tracks)
		sum.FinalTNs = p.LastTracks().TNs
	}
	if started {
		if err := write(out.Health, p.Health(clock, nil)); err != nil {
			return nil, err
		}
	}

	st := p.Stats()
	ec := p.Engine().Counters()
	sum.Records = rr.Records()
	sum.MalformedLines = rr.Malformed()
	sum.OtherTopic = st.OtherTopic
	sum.Messages = st.Messages - st.OtherTopic
	sum.Accepted = st.Accepted
	sum.Rejected = p.RejectedByReason()
	sum.LateDropped = ec.LateDropped
	sum.Rewinds = ec.Rewinds
	sum.TracksMessages = st.TracksOut
	sum.HealthMessages = st.HealthOut
	sum.TracksConfirmed = st.Confirmed
	sum.LastRxNs = clock
	sum.Births, sum.Deletions, sum.FilterErrors = ec.Births, ec.Deletions, ec.FilterErrors
	sum.NonFinite = st.NonFinite
	return sum, nil
}

// nextRecord reads the next well-formed record into r, logging and skipping
// malformed lines. It returns io.EOF at the end of the recording, ctx.Err()
// once ctx is done (checked before every line), or the reader's fatal error.
func nextRecord(ctx context.Context, rr *transport.RecordReader, r *transport.Record, log *zap.Logger) error {
	for ctx.Err() == nil {
		err := rr.Next(r)
		var le *transport.LineError
		if errors.As(err, &le) {
			log.Warn("malformed recording line", zap.Int("line", le.Line), zap.String("error", le.Msg))
			continue
		}
		if err != nil && err != io.EOF {
			return fmt.Errorf("reading the recording: %w", err)
		}
		return err
	}
	return ctx.Err()
}

// pacer holds a recording to its recorded pace divided by speed: a record
// is due at the first one's wall time plus the recorded time since, each
// pause in the recording cut to maxCatchUpNs (as for output).
type pacer struct {
	speed     float64 // ≤ 0: as fast as possible
	wallStart time.Time
	prevRx    int64
	elapsedNs int64
}

func (p *pacer) start(rx int64, wall time.Time) { p.prevRx, p.wallStart = rx, wall }

// wait sleeps until the record received at rx is due; it returns ctx.Err()
// when ctx ends first.
func (p *pacer) wait(ctx context.Context, rx int64) error {
	if p.speed <= 0 {
		return nil
	}
	if d := rx - p.prevRx; d > 0 {
		p.elapsedNs += min(d, maxCatchUpNs)
	}
	p.prevRx = rx
	return sleepUntil(ctx, p.wallStart.Add(time.Duration(float64(p.elapsedNs)/p.speed)))
}

// ceilMultiple is the smallest multiple of p at or after t (p > 0).
func ceilMultiple(t, p int64) int64 {
	q := t / p
	if t%p != 0 && t > 0 {
		q++
	}
	return q * p
}

func sleepUntil(ctx context.Context, due time.Time) error {
	d := time.Until(due)
	if d <= 0 {
		return ctx.Err()
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}
