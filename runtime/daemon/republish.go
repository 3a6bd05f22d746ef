package daemon

import (
	"context"
	"io"
	"math"
	"strconv"
	"time"

	"github.com/godwit-fusion/godwit/transport"
	"github.com/valyala/fastjson"
	"go.uber.org/zap"
)

// Publisher is what Republish needs of an MQTT client.
type Publisher interface {
	Publish(topic string, payload []byte, qos byte, retain bool) error
}

// RepublishOptions tune Republish.
type RepublishOptions struct {
	// Speed paces by the recorded arrival times (1 real time); 0 sends as
	// fast as the broker takes them.
	Speed float64
	// Topics, when not empty, limits the messages sent to those whose topic
	// matches one of these filters (e.g. a configuration's sensor topics).
	Topics []string
	// Retime adds one constant to every measurement's t_ns, so that the
	// first message is stamped as if measured when it is sent: a live
	// daemon would otherwise reject an old recording as time_implausible.
	// The spacing of the times is kept, so at Speed ≠ 1 they drift from
	// the wall clock.
	Retime bool
	Logger *zap.Logger
}

// RepublishSummary says what Republish sent.
type RepublishSummary struct {
	Records        int
	MalformedLines int
	Sent           uint64
	Skipped        uint64 // on topics outside Topics, or with an implausible rx_ns
	Failed         uint64 // the broker did not take them
	Retimed        uint64 // measurement messages whose t_ns was shifted
}

// Republish sends a recording's messages to a broker with their recorded
// topic, QoS and retain flag, at the recorded pace, so a live daemon can be
// bench-tested with recorded traffic. Payloads go out byte for byte unless
// Retime rewrites t_ns. Cancelling ctx stops it.
func Republish(ctx context.Context, rec io.Reader, pub Publisher, opt RepublishOptions) (*RepublishSummary, error) {
	log := opt.Logger
	if log == nil {
		log = zap.NewNop()
	}
	rr := transport.NewRecordReader(rec, 0)
	sum := &RepublishSummary{}
	var (
		r        transport.Record
		started  bool
		pace     = pacer{speed: opt.Speed}
		offset   int64
		parser   fastjson.Parser
		arena    fastjson.Arena
		buf      []byte
		lastWarn time.Time
	)
	for {
		err := nextRecord(ctx, rr, &r, log)
		if err == io.EOF || err != nil && err == ctx.Err() {
			break
		}
		if err != nil {
			return nil, err
		}
		if len(opt.Topics) > 0 && !matchesAny(opt.Topics, r.Topic) {
			sum.Skipped++
			continue
		}
		if r.RxNs <= 0 || r.RxNs > maxRxNs {
			sum.Skipped++
			continue
		}
		if !started {
			started = true
			wallStart := time.Now()
			pace.start(r.RxNs, wallStart)
			offset = wallStart.UnixNano() - r.RxNs
		}
		if pace.wait(ctx, r.RxNs) != nil {
			break
		}
		payload := r.Payload
		if opt.Retime {
			if b, ok := retime(&parser, &arena, buf[:0], payload, offset); ok {
				payload, buf = b, b
				sum.Retimed++
			}
		}
		if err := pub.Publish(r.Topic, payload, r.QoS, r.Retained); err != nil {
			sum.Failed++
			if time.Since(lastWarn) >= time.Second {
				log.Warn("publish failed", zap.String("topic", r.Topic), zap.Error(err))
				lastWarn = time.Now()
			}
			continue
		}
		sum.Sent++
	}
	sum.Records, sum.MalformedLines = rr.Records(), rr.Malformed()
	return sum, nil
}

// retime shifts the integer t_ns of a measurement message by offset. Other
// payloads (not an object, no integer t_ns, or a t_ns the shift would carry
// past the int64 range) are left alone.
func retime(p *fastjson.Parser, a *fastjson.Arena, dst, payload []byte, offset int64) ([]byte, bool) {
	v, err := p.ParseBytes(payload)
	if err != nil || v.Type() != fastjson.TypeObject {
		return nil, false
	}
	tv := v.Get("t_ns")
	if tv == nil || tv.Type() != fastjson.TypeNumber {
		return nil, false
	}
	t, err := tv.Int64()
	if err != nil || (offset > 0 && t > math.MaxInt64-offset) || (offset < 0 && t < math.MinInt64-offset) {
		return nil, false
	}
	a.Reset()
	v.Set("t_ns", a.NewNumberString(strconv.FormatInt(t+offset, 10)))
	return v.MarshalTo(dst), true
}

func matchesAny(filters []string, topic string) bool {
	for _, f := range filters {
		if TopicMatches(f, topic) {
			return true
		}
	}
	return false
}
