// Package daemon drives godwit's fusion engine from MQTT (Daemon) and from
// recordings (Replay). Both feed the same Pipeline: decode, ingest, advance,
// encode. The Pipeline reads no clock; only the Daemon gives the engine
// wall-clock times (Replay's optional pacing waits on the wall clock but
// hands the engine recorded times), so a replay repeats a run bit for bit.
package daemon

import (
	"errors"
	"strings"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/filters/geo"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
	"go.uber.org/zap"
)

// PipelineStats are the pipeline's own counters; the engine keeps the
// fusion ones.
type PipelineStats struct {
	Messages    uint64                       // offered to Handle
	OtherTopic  uint64                       // on a topic no sensor is configured for, ignored
	Accepted    uint64                       // taken by the engine (late-dropped ones included)
	Rejected    [transport.NumReasons]uint64 // refused by the decoder, by reason
	Refused     uint64                       // decoded but refused by the engine (duplicate, ego shape)
	LateDropped uint64                       // older than the lag window
	TracksOut   uint64                       // tracks messages encoded
	HealthOut   uint64                       // health messages encoded
	NonFinite   uint64                       // encoded messages that carried NaN/Inf (written as null)
	Confirmed   uint64                       // distinct track ids seen confirmed
	LastTNs     int64                        // stamp of the newest tracks message
}

// Pipeline is the deterministic path from a received payload to encoded
// tracks and health messages. It owns the decoder, the engine and every
// buffer, so once warm it allocates nothing per accepted message. Not safe
// for concurrent use.
type Pipeline struct {
	cfg     *configs.Config
	eng     *engine.Engine
	dec     *transport.Decoder
	specs   []transport.SensorSpec
	filters []string // sensor topics (MQTT filters) this pipeline listens to

	meas   transport.Measurement
	tracks transport.TracksMsg
	health transport.HealthMsg
	tbuf   []byte
	hbuf   []byte
	stats  PipelineStats

	confirmed map[uint64]struct{}
	latency   transport.Latency // the daemon's wall-clock measurement; zero in replay
	last      handled           // what Handle did with the latest message
	log       *zap.Logger
	limiter   rejectLimiter
}

// NewPipeline builds the engine and the decoder from a validated
// configuration. log receives rejected messages, rate-limited; nil discards.
func NewPipeline(cfg *configs.Config, opt engine.Options, log *zap.Logger) (*Pipeline, error) {
	eng, err := engine.New(cfg, opt)
	if err != nil {
		return nil, err
	}
	specs := make([]transport.SensorSpec, len(cfg.Sensors))
	filters := make([]string, 0, len(cfg.Sensors))
	for i, s := range cfg.Sensors {
		specs[i] = transport.SensorSpec{Name: s.Name, Dim: configs.MeasDim(s.Kind)}
		if !contains(filters, s.Topic) {
			filters = append(filters, s.Topic)
		}
	}
	dec, err := transport.NewDecoder(specs, DecoderLimits(cfg))
	if err != nil {
		return nil, err
	}
	if log == nil {
		log = zap.NewNop()
	}
	return &Pipeline{
		cfg: cfg, eng: eng, dec: dec, specs: specs, filters: filters,
		tbuf: make([]byte, 0, 4096), hbuf: make([]byte, 0, 2048),
		confirmed: make(map[uint64]struct{}),
		log:       log,
	}, nil
}

// DecoderLimits maps the configuration's limits onto the decoder's. With
// timing.clock estimate the sensor clocks run free, so their t_ns cannot be
// judged against the arrival time and the window check is off.
func DecoderLimits(cfg *configs.Config) transport.Limits {
	w := time.Duration(cfg.Limits.TimeWindowMS * float64(time.Millisecond))
	if cfg.Timing.Clock == configs.ClockEstimate {
		w = -1
	}
	return transport.Limits{MaxPayloadBytes: cfg.Limits.MaxPayloadBytes, PastWindow: w, FutureWindow: w}
}

func (p *Pipeline) sensorSpecs() []transport.SensorSpec { return p.specs }

// Topics lists the MQTT filters of the configured sensors, without repeats.
func (p *Pipeline) Topics() []string { return p.filters }

// Engine is the fusion core the pipeline drives (for counters and stats).
func (p *Pipeline) Engine() *engine.Engine { return p.eng }

// Stats copies the pipeline counters.
func (p *Pipeline) Stats() PipelineStats { return p.stats }

// PerScan reports whether output follows every processed scan (rate_hz 0)
// instead of a clock.
func (p *Pipeline) PerScan() bool { return !(p.cfg.Output.RateHz > 0) }

// RatePeriodNs is the output period in ns, 0 with rate_hz 0.
func (p *Pipeline) RatePeriodNs() int64 {
	if p.PerScan() {
		return 0
	}
	return int64(1e9/p.cfg.Output.RateHz + 0.5)
}

// Handle decodes one received message and gives it to the engine with its
// arrival time. It returns nil when the engine took the message (a scan was
// processed), otherwise why not; every refusal is counted and logged
// rate-limited, and none of them changes a track.
func (p *Pipeline) Handle(topic string, payload []byte, arrivalNs int64) error {
	p.stats.Messages++
	sensor := p.sensorOf(topic)
	p.last = handled{sensor: sensor, outcome: outcomeOtherTopic}
	if sensor == notListened {
		p.stats.OtherTopic++
		return errOtherTopic
	}
	if err := p.dec.Decode(payload, arrivalNs, &p.meas); err != nil {
		reason, _ := transport.ReasonOf(err)
		p.last.outcome = int(reason)
		p.stats.Rejected[reason]++
		// The payload cannot be trusted to name its sensor, but a topic
		// only one sensor uses does (−1: shared topic, count by reason only).
		p.eng.Reject(sensor, reason.String())
		p.limiter.note(p.log, topic, reason.String(), err, arrivalNs)
		return err
	}
	// Decoded: the payload named a configured sensor.
	p.last.sensor = p.meas.SensorIdx
	err := p.eng.Ingest(&p.meas, arrivalNs)
	switch {
	case err == nil:
		p.stats.Accepted++
		p.last.outcome = outcomeAccepted
	case errors.Is(err, engine.ErrLate):
		p.stats.Accepted++
		p.stats.LateDropped++
		p.last.outcome = outcomeLate
	default:
		p.stats.Refused++
		p.last.outcome = engineReason(err)
		p.limiter.note(p.log, topic, "engine", err, arrivalNs)
	}
	return err
}

// handled is what Handle did with one message, for the daemon's metrics:
// the sensor it is attributed to (−1 when it cannot be: a rejected message
// on a topic several sensors share) and the outcome, either one of the
// outcome constants or an index into rejectReasons.
type handled struct {
	sensor  int
	outcome int
}

const (
	outcomeAccepted   = -1
	outcomeLate       = -2
	outcomeOtherTopic = -3
)

// rejectReasons are the reason label values of the rejection metric: the
// decoder's (transport.Reason, in its order, so a Reason is its own index)
// then the engine's own, the same codes as the health message's
// counters.rejected.
var rejectReasons = func() []string {
	r := make([]string, 0, transport.NumReasons+3)
	for i := 0; i < transport.NumReasons; i++ {
		r = append(r, transport.Reason(i).String())
	}
	return append(r, "duplicate", "out_of_range", "other")
}()

var (
	reasonDuplicate  = transport.NumReasons
	reasonOutOfRange = transport.NumReasons + 1
	reasonOther      = transport.NumReasons + 2
)

// engineReason maps an Ingest refusal onto its reason code. The engine
// returns sentinel errors, not the code it counts, so this mirrors its
// validate; a failure that is not a refusal of the input (a snapshot that
// could not be saved) is "other".
func engineReason(err error) int {
	switch {
	case errors.Is(err, engine.ErrBadSensor):
		return int(transport.ReasonUnknownSensor)
	case errors.Is(err, engine.ErrBadDims), errors.Is(err, engine.ErrEgoSingle):
		return int(transport.ReasonBadDims)
	case errors.Is(err, engine.ErrNonFinite):
		return int(transport.ReasonNonFinite)
	case errors.Is(err, engine.ErrBadCov):
		return int(transport.ReasonBadCov)
	case errors.Is(err, engine.ErrDuplicate):
		return reasonDuplicate
	case errors.Is(err, geo.ErrRange):
		return reasonOutOfRange
	}
	return reasonOther
}

var errOtherTopic = errors.New("daemon: message on a topic no sensor listens to")

func (p *Pipeline) listens(topic string) bool { return p.sensorOf(topic) != notListened }

const notListened = -2

// sensorOf is the index of the one sensor whose topic filter matches topic,
// −1 when several do, notListened when none does.
func (p *Pipeline) sensorOf(topic string) int {
	idx := notListened
	for i := range p.cfg.Sensors {
		if TopicMatches(p.cfg.Sensors[i].Topic, topic) {
			if idx != notListened {
				return -1
			}
			idx = i
		}
	}
	return idx
}

// Advance tells the engine the time and returns an encoded tracks message
// when one is due. The bytes are valid until the next Advance or Flush.
func (p *Pipeline) Advance(nowNs int64) ([]byte, bool) {
	if !p.eng.Advance(nowNs, &p.tracks) {
		return nil, false
	}
	return p.encodeTracks(), true
}

// Flush is the end of input: one final tracks message stamped at the latest
// measurement time. It reports false when nothing was ever processed.
func (p *Pipeline) Flush() ([]byte, bool) {
	if !p.eng.Flush(&p.tracks) {
		return nil, false
	}
	return p.encodeTracks(), true
}

// FlushAt is Flush stamped at tNs (engine.FlushAt): the end of a recording,
// whose newest measurement may be one the engine refused.
func (p *Pipeline) FlushAt(tNs int64) ([]byte, bool) {
	if !p.eng.FlushAt(tNs, &p.tracks) {
		return nil, false
	}
	return p.encodeTracks(), true
}

// releaseBuffers gives up the health buffer after a publish that may still
// hold it (a timeout inside the MQTT library); the next message allocates.
// The tracks buffer is never in flight: the daemon swaps it with a free
// slot of its output ring.
func (p *Pipeline) releaseBuffers() {
	p.hbuf = make([]byte, 0, cap(p.hbuf))
}

// LastTracks is the message most recently written by Advance or Flush.
func (p *Pipeline) LastTracks() *transport.TracksMsg { return &p.tracks }

func (p *Pipeline) encodeTracks() []byte {
	var err error
	p.tbuf, err = transport.AppendTracks(p.tbuf[:0], &p.tracks)
	if err != nil {
		p.stats.NonFinite++
	}
	p.stats.TracksOut++
	p.stats.LastTNs = p.tracks.TNs
	for i := range p.tracks.Tracks {
		if tr := &p.tracks.Tracks[i]; tr.Status == "confirmed" {
			if _, seen := p.confirmed[tr.ID]; !seen {
				p.confirmed[tr.ID] = struct{}{}
				p.stats.Confirmed++
			}
		}
	}
	return p.tbuf
}

// Health encodes the health message for time nowNs. extra alerts (a
// caller's own; the daemon has none since the engine watches the broker
// and the queue) are appended and make the state at least degraded. The
// bytes are valid until the next Health.
func (p *Pipeline) Health(nowNs int64, extra []transport.Alert) []byte {
	p.eng.Health(nowNs, &p.health)
	p.health.LatencyMS = p.latency
	if len(extra) > 0 {
		p.health.Alerts = append(p.health.Alerts, extra...)
		if p.health.State == "ok" {
			p.health.State = "degraded"
		}
	}
	var err error
	p.hbuf, err = transport.AppendHealth(p.hbuf[:0], &p.health)
	if err != nil {
		p.stats.NonFinite++
	}
	p.stats.HealthOut++
	return p.hbuf
}

// RejectedByReason lists the refusals the health message reports (decoder
// reasons, then the engine's own), leaving out zero counts.
func (p *Pipeline) RejectedByReason() map[string]uint64 {
	var h transport.HealthMsg
	p.eng.Health(0, &h)
	out := make(map[string]uint64)
	for _, rc := range h.Counters.Rejected {
		if rc.Count > 0 {
			out[rc.Reason] = rc.Count
		}
	}
	return out
}

// rejectLimiter logs at most one refusal per reason per second of arrival
// time and says how many it held back, so a flood of bad messages cannot
// flood the log (STYLE.md: log rejections rate-limited).
type rejectLimiter struct {
	kinds []limitState
}

type limitState struct {
	key        string
	lastNs     int64
	suppressed uint64
}

func (l *rejectLimiter) note(log *zap.Logger, topic, key string, err error, atNs int64) {
	var s *limitState
	for i := range l.kinds {
		if l.kinds[i].key == key {
			s = &l.kinds[i]
		}
	}
	if s == nil {
		l.kinds = append(l.kinds, limitState{key: key, lastNs: atNs - int64(time.Second)})
		s = &l.kinds[len(l.kinds)-1]
	}
	if atNs-s.lastNs < int64(time.Second) {
		s.suppressed++
		return
	}
	log.Warn("rejected message", zap.String("topic", topic), zap.String("reason", key),
		zap.String("error", err.Error()), zap.Uint64("suppressed_since_last", s.suppressed))
	s.lastNs, s.suppressed = atNs, 0
}

// TopicMatches reports whether an MQTT topic matches a subscription filter
// with the + and # wildcards (MQTT 3.1.1, section 4.7).
func TopicMatches(filter, topic string) bool {
	if filter == topic {
		return true
	}
	// Topics starting with $ are not matched by a leading wildcard (§4.7.2).
	if strings.HasPrefix(topic, "$") && (strings.HasPrefix(filter, "+") || strings.HasPrefix(filter, "#")) {
		return false
	}
	for {
		fl, frest, fmore := strings.Cut(filter, "/")
		if fl == "#" {
			return true
		}
		tl, trest, tmore := strings.Cut(topic, "/")
		if fl != "+" && fl != tl {
			return false
		}
		if !fmore || !tmore {
			// "a/#" also matches "a" (§4.7.1.2).
			return fmore == tmore || (!tmore && frest == "#")
		}
		filter, topic = frest, trest
	}
}

func contains(xs []string, x string) bool {
	for _, y := range xs {
		if y == x {
			return true
		}
	}
	return false
}
