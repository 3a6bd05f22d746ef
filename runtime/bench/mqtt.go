package bench

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"sort"
	"sync"
	"sync/atomic"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/valyala/fastjson"

	"github.com/godwit-fusion/godwit/transport"
)

// MQTTOptions set up the MQTT rows.
type MQTTOptions struct {
	BrokerURL string        // required
	Rate      float64       // messages/s of the latency phase; 0 means 2000
	Latency   time.Duration // length of the latency phase; 0 means 3 s
	Flood     int           // messages of the throughput phase; 0 means 50000
	QoS       byte          // for both paths
	Targets   int           // detections per sensor message; 0 means 5
	// PadTo, on the raw path, adds detections to each sensor message until
	// it has at least this many bytes (to match the tracks messages).
	PadTo int
	// Executable, when set, is this binary: the godwit path then runs it as
	// "godwit run" in its own process, as on a vehicle.
	Executable string
	// ChildProfile, with Executable, is passed to the child as --cpuprofile.
	ChildProfile string
	// Trial is the length of each paced run of the sustained-rate search;
	// 0 means 1 s, negative skips the search.
	Trial time.Duration
}

func (o *MQTTOptions) defaults() {
	if o.Rate <= 0 {
		o.Rate = 2000
	}
	if o.Latency <= 0 {
		o.Latency = 3 * time.Second
	}
	if o.Flood <= 0 {
		o.Flood = 50000
	}
	if o.Targets <= 0 {
		o.Targets = 5
	}
	if o.Trial == 0 {
		o.Trial = time.Second
	}
}

// PathResult is one MQTT path measured: latency at a fixed rate and the
// sustained rate under a flood.
type PathResult struct {
	Sent, Received   int     // latency phase: published, and messages received
	Reflected        int     // latency phase: sent messages some received message reflects
	P50Ms, P99Ms     float64 // publish stamp → receipt, nearest rank
	FloodSent        int
	FloodReceived    int     // at the subscriber (godwit: tracks messages)
	FloodIngested    uint64  // godwit only: messages the pipeline took
	FloodDropped     uint64  // godwit only: dropped by the daemon's queue
	FloodPushed      uint64  // godwit only: reached the daemon's queue
	RatePerSec       float64 // flood: received (godwit: ingested) ÷ time
	Sustained        float64 // highest paced rate taken in full (msg/s); 0 if not searched
	Trials           int     // paced runs of the search
	Where            string  // godwit only: where the daemon ran
	MsgBytes         int     // size of the messages received in the latency phase (the last one)
	OwnP50Ms         float64 // godwit only: its health message's latency_ms after the latency phase
	OwnP99Ms         float64
	StartToFirstMsMs float64 // godwit only: Run → first message ingested
}

// scanPayload is a small sensor message (a lidar scan) stamped with t_ns.
type scanPayload struct {
	m   transport.Measurement
	buf []byte
}

func newScanPayload(targets int) *scanPayload {
	s := &scanPayload{m: transport.Measurement{V: transport.Version, Sensor: LidarName}}
	for i := 0; i < targets; i++ {
		var d transport.Detection
		d.Dim = 2
		d.Z[0], d.Z[1] = -20+10*float64(i), 30
		s.m.Dets = append(s.m.Dets, d)
	}
	return s
}

// padTo adds detections until the encoded message has at least n bytes.
func (s *scanPayload) padTo(n int) {
	for {
		b, err := transport.AppendMeasurement(s.buf[:0], &s.m)
		s.buf = b
		if err != nil || len(b) >= n || len(s.m.Dets) >= 4096 {
			return
		}
		var d transport.Detection
		d.Dim = 2
		d.Z[0], d.Z[1] = -20+10*float64(len(s.m.Dets)), 30
		s.m.Dets = append(s.m.Dets, d)
	}
}

// next stamps the message with the wall clock now and encodes it.
func (s *scanPayload) next() ([]byte, error) {
	s.m.Seq++
	s.m.TNs = time.Now().UnixNano()
	var err error
	s.buf, err = transport.AppendMeasurement(s.buf[:0], &s.m)
	// paho keeps the payload until written: hand it its own copy.
	return append([]byte(nil), s.buf...), err
}

// receiver records latencies on its topic. A message stamped t_ns reflects
// every sensor message published at or before t_ns that no earlier message
// reflected (with rate_hz 0 the daemon lets a backlog of scans share one
// tracks message): each of those gets now − its own publish time. On the
// raw path that is the message itself.
type receiver struct {
	mu     sync.Mutex
	lat    []float64 // ms
	sent   []int64   // publish stamps of the latency phase, in order
	next   int       // sent[next:] not reflected yet
	tracks int       // tracks in the newest message
	count  atomic.Int64
	last   atomic.Int64 // wall ns of the newest receipt
	size   atomic.Int64 // bytes of the newest message
	keep   atomic.Bool
	p      fastjson.Parser
}

func (r *receiver) handle(_ paho.Client, m paho.Message) {
	r.record(m.Payload(), time.Now().UnixNano())
}

// record takes one message received at now.
func (r *receiver) record(payload []byte, now int64) {
	r.count.Add(1)
	r.last.Store(now)
	r.size.Store(int64(len(payload)))
	if !r.keep.Load() {
		// Count the tracks of the newest message only (the process row).
		r.mu.Lock()
		r.tracks = bytes.Count(payload, []byte(`"id":`))
		r.mu.Unlock()
		return
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	v, err := r.p.ParseBytes(payload)
	if err != nil {
		return
	}
	t := v.GetInt64("t_ns")
	for ; r.next < len(r.sent) && r.sent[r.next] <= t; r.next++ {
		r.lat = append(r.lat, float64(now-r.sent[r.next])*1e-6)
	}
}

// sending records the publish stamp of a latency-phase message; stamps
// increase.
func (r *receiver) sending(tNs int64) {
	r.mu.Lock()
	r.sent = append(r.sent, tNs)
	r.mu.Unlock()
}

func (r *receiver) reflected() int64 {
	r.mu.Lock()
	defer r.mu.Unlock()
	return int64(r.next)
}

func (r *receiver) lastTracks() int {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.tracks
}

func (r *receiver) reset(keep bool) {
	r.mu.Lock()
	r.lat = r.lat[:0]
	r.sent, r.next = r.sent[:0], 0
	r.mu.Unlock()
	r.count.Store(0)
	r.keep.Store(keep)
}

func (r *receiver) quantiles() (p50, p99 float64) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if len(r.lat) == 0 {
		return math.NaN(), math.NaN()
	}
	s := append([]float64(nil), r.lat...)
	sort.Float64s(s)
	rank := func(p float64) float64 { return s[min(len(s)-1, max(0, int(math.Ceil(p*float64(len(s))))-1))] }
	return rank(0.5), rank(0.99)
}

func connect(url, id string) (paho.Client, error) {
	o := paho.NewClientOptions().AddBroker(url).SetClientID(id).SetCleanSession(true).
		SetAutoReconnect(false).SetConnectTimeout(5 * time.Second).SetOrderMatters(false)
	c := paho.NewClient(o)
	tok := c.Connect()
	if !tok.WaitTimeout(5*time.Second) || tok.Error() != nil {
		return nil, fmt.Errorf("bench: connect %s to %s: %v", id, url, tok.Error())
	}
	return c, nil
}

func subscribe(c paho.Client, topic string, qos byte, r *receiver) error {
	tok := c.Subscribe(topic, qos, r.handle)
	if !tok.WaitTimeout(5*time.Second) || tok.Error() != nil {
		return fmt.Errorf("bench: subscribe %s: %v", topic, tok.Error())
	}
	return nil
}

// paced publishes at rate for d, each message stamped as it goes out.
func paced(ctx context.Context, pub paho.Client, topic string, qos byte, sp *scanPayload, rate float64, d time.Duration, rcv *receiver) (int, error) {
	start := time.Now()
	n := int(rate * d.Seconds())
	for i := 0; i < n; i++ {
		due := start.Add(time.Duration(float64(i) / rate * 1e9))
		if w := time.Until(due); w > 0 {
			time.Sleep(w)
		}
		if ctx.Err() != nil {
			return i, ctx.Err()
		}
		b, err := sp.next()
		if err != nil {
			return i, err
		}
		rcv.sending(sp.m.TNs)
		tok := pub.Publish(topic, qos, false, b)
		if qos > 0 {
			tok.Wait()
		}
	}
	return n, nil
}

// flood publishes n messages as fast as the client takes them.
func flood(pub paho.Client, topic string, qos byte, sp *scanPayload, n int) error {
	var last paho.Token
	for i := 0; i < n; i++ {
		b, err := sp.next()
		if err != nil {
			return err
		}
		last = pub.Publish(topic, qos, false, b)
	}
	if last != nil {
		last.WaitTimeout(10 * time.Second)
	}
	return nil
}

// settle waits until count stops growing for quiet (or reaches want).
func settle(count func() int64, want int64, quiet time.Duration) {
	prev, since := count(), time.Now()
	for {
		time.Sleep(5 * time.Millisecond)
		c := count()
		if c >= want {
			return
		}
		if c != prev {
			prev, since = c, time.Now()
		} else if time.Since(since) > quiet {
			return
		}
	}
}

// RawPath measures the broker itself: a plain paho publisher and subscriber
// exchanging the same sensor messages godwit would get. It is the limit
// the godwit path is compared with.
func RawPath(ctx context.Context, o MQTTOptions) (PathResult, error) {
	o.defaults()
	const topic = "godwit-bench/raw"
	pub, err := connect(o.BrokerURL, fmt.Sprintf("godwit-bench-rawpub-%d", time.Now().UnixNano()))
	if err != nil {
		return PathResult{}, err
	}
	defer pub.Disconnect(100)
	sub, err := connect(o.BrokerURL, fmt.Sprintf("godwit-bench-rawsub-%d", time.Now().UnixNano()))
	if err != nil {
		return PathResult{}, err
	}
	defer sub.Disconnect(100)
	var rcv receiver
	if err := subscribe(sub, topic, o.QoS, &rcv); err != nil {
		return PathResult{}, err
	}
	sp := newScanPayload(o.Targets)
	sp.padTo(o.PadTo)
	var res PathResult
	rcv.reset(true)
	if res.Sent, err = paced(ctx, pub, topic, o.QoS, sp, o.Rate, o.Latency, &rcv); err != nil {
		return res, err
	}
	settle(rcv.reflected, int64(res.Sent), time.Second)
	res.Received, res.Reflected = int(rcv.count.Load()), int(rcv.reflected())
	res.P50Ms, res.P99Ms = rcv.quantiles()
	res.MsgBytes = int(rcv.size.Load())

	rcv.reset(false)
	t0 := time.Now()
	if err := flood(pub, topic, o.QoS, sp, o.Flood); err != nil {
		return res, err
	}
	settle(func() int64 { return rcv.count.Load() }, int64(o.Flood), time.Second)
	res.FloodSent, res.FloodReceived = o.Flood, int(rcv.count.Load())
	if el := time.Duration(rcv.last.Load() - t0.UnixNano()); el > 0 {
		res.RatePerSec = float64(res.FloodReceived) / el.Seconds()
	}
	if o.Trial > 0 {
		res.Sustained, res.Trials, err = sustainedRate(func(rate float64) (trialResult, error) {
			return trial(ctx, pub, topic, sp, rate, o.Trial, rcv.count.Load)
		})
	}
	return res, err
}

// GodwitPath measures publisher → godwit daemon → subscriber on the same
// broker, with output.rate_hz 0: every processed scan is reflected in a
// tracks message stamped with the newest scan's t_ns, which is the publish
// time the publisher wrote into the sensor message. With o.Executable the
// daemon is that binary run as "godwit run" in its own process; otherwise
// it runs in the bench's process.
func GodwitPath(ctx context.Context, o MQTTOptions) (PathResult, error) {
	o.defaults()
	params := ConfigParams{BrokerURL: o.BrokerURL, QoS: int(o.QoS), RateHz: 0,
		ClientID: fmt.Sprintf("godwit-bench-%d", time.Now().UnixNano()), LidarMS: 1000 / o.Rate, QueueLen: 4096}
	pub, err := connect(o.BrokerURL, fmt.Sprintf("godwit-bench-pub-%d", time.Now().UnixNano()))
	if err != nil {
		return PathResult{}, err
	}
	defer pub.Disconnect(100)
	sub, err := connect(o.BrokerURL, fmt.Sprintf("godwit-bench-sub-%d", time.Now().UnixNano()))
	if err != nil {
		return PathResult{}, err
	}
	defer sub.Disconnect(100)
	var rcv receiver
	if err := subscribe(sub, TracksTopic, o.QoS, &rcv); err != nil {
		return PathResult{}, err
	}
	var health healthWatch
	if tok := sub.Subscribe(HealthTopic, 0, health.handle); !tok.WaitTimeout(5*time.Second) || tok.Error() != nil {
		return PathResult{}, fmt.Errorf("bench: subscribe %s: %v", HealthTopic, tok.Error())
	}
	sp := newScanPayload(o.Targets)
	var res PathResult
	start := time.Now()
	var g godwitUnderTest
	var own *ownProcess
	if o.Executable != "" {
		own, err = startOwnProcess(ctx, o.Executable, params, o.ChildProfile)
		g = own
	} else {
		g, err = startInProcess(ctx, params)
	}
	if err != nil {
		return res, err
	}
	defer g.stop()
	res.Where = g.where()
	// Start → subscribed: probe every millisecond until a tracks message
	// comes back (so the figure is at most 1 ms pessimistic).
	rcv.reset(false)
	for rcv.count.Load() == 0 {
		if time.Since(start) > 10*time.Second {
			return res, errors.New("bench: godwit gave no tracks message within 10 s of starting")
		}
		if own != nil {
			if err, gone := own.exited(); gone {
				return res, fmt.Errorf("bench: the godwit process exited early: %v", err)
			}
		}
		b, err := sp.next()
		if err != nil {
			return res, err
		}
		pub.Publish(LidarTopic, o.QoS, false, b)
		time.Sleep(time.Millisecond)
	}
	res.StartToFirstMsMs = float64(time.Since(start).Nanoseconds()) * 1e-6
	time.Sleep(100 * time.Millisecond)

	rcv.reset(true)
	if res.Sent, err = paced(ctx, pub, LidarTopic, o.QoS, sp, o.Rate, o.Latency, &rcv); err != nil {
		return res, err
	}
	phaseEnd := time.Now()
	settle(rcv.reflected, int64(res.Sent), time.Second)
	res.Received, res.Reflected = int(rcv.count.Load()), int(rcv.reflected())
	res.P50Ms, res.P99Ms = rcv.quantiles()
	res.MsgBytes = int(rcv.size.Load())
	// godwit's own figure, arrival to hand-off, from the first health
	// message after the phase (its window is the last 1024 scans).
	res.OwnP50Ms, res.OwnP99Ms = health.after(phaseEnd, 3*time.Second)

	rcv.reset(false)
	taken := func() int64 {
		c, err := g.counts()
		if err != nil {
			return -1
		}
		return int64(c.Taken)
	}
	s0, err := g.counts()
	if err != nil {
		return res, err
	}
	t0 := time.Now()
	if err := flood(pub, LidarTopic, o.QoS, sp, o.Flood); err != nil {
		return res, err
	}
	var lastIngest time.Time
	prev := int64(s0.Taken)
	settle(func() int64 {
		m := taken()
		if m != prev {
			prev, lastIngest = m, time.Now()
		}
		return m - int64(s0.Taken)
	}, int64(o.Flood), time.Second)
	settle(func() int64 { return rcv.count.Load() }, int64(o.Flood), 500*time.Millisecond)
	s1, err := g.counts()
	if err != nil {
		return res, err
	}
	res.FloodSent, res.FloodReceived = o.Flood, int(rcv.count.Load())
	res.FloodIngested = s1.Taken - s0.Taken
	res.FloodDropped = s1.Dropped - s0.Dropped
	res.FloodPushed = res.FloodIngested + res.FloodDropped
	if el := lastIngest.Sub(t0); el > 0 {
		res.RatePerSec = float64(res.FloodIngested) / el.Seconds()
	}
	if o.Trial > 0 {
		res.Sustained, res.Trials, err = sustainedRate(func(rate float64) (trialResult, error) {
			// Start each trial with the queue drained.
			settle(taken, math.MaxInt64, 100*time.Millisecond)
			return trial(ctx, pub, LidarTopic, sp, rate, o.Trial, taken)
		})
	}
	return res, err
}

// MQTTRows measures both paths one after the other on the same broker and
// reports them side by side, with the ratio of sustained rates.
func MQTTRows(ctx context.Context, o MQTTOptions) ([]Row, error) {
	o.defaults()
	raw, err := RawPath(ctx, o)
	if err != nil {
		return nil, err
	}
	gw, err := GodwitPath(ctx, o)
	if err != nil {
		return nil, err
	}
	// The broker's own latency at the tracks messages' size: a broker that
	// holds back larger messages (Nagle's algorithm) shows it here too.
	sized := o
	sized.PadTo, sized.Flood, sized.Trial = gw.MsgBytes, 1000, -1
	big, err := RawPath(ctx, sized)
	if err != nil {
		return nil, err
	}
	r1 := Row{Section: "mqtt", Name: fmt.Sprintf("raw paho pub → sub, %d dets/msg", o.Targets)}
	r1.add("p50", raw.P50Ms, "ms")
	r1.add("p99", raw.P99Ms, "ms")
	if raw.Trials > 0 {
		r1.add("sustained", raw.Sustained, "msg/s")
	}
	r1.add("flood", raw.RatePerSec, "msg/s")
	r1.Note = fmt.Sprintf("latency at %g msg/s QoS %d: %d/%d received; flood %d/%d received",
		o.Rate, o.QoS, raw.Reflected, raw.Sent, raw.FloodReceived, raw.FloodSent)
	if raw.Trials > 0 {
		r1.Note += fmt.Sprintf("; sustained: highest paced rate taken in full, %d trials of %s", raw.Trials, o.Trial)
	}
	r2 := Row{Section: "mqtt", Name: "pub → godwit (rate_hz 0) → sub"}
	r2.add("p50", gw.P50Ms, "ms")
	r2.add("p99", gw.P99Ms, "ms")
	if gw.Trials > 0 {
		r2.add("sustained", gw.Sustained, "msg/s")
	}
	r2.add("flood", gw.RatePerSec, "msg/s")
	r2.add("added p99", gw.P99Ms-raw.P99Ms, "ms")
	r2.add("in godwit p50", gw.OwnP50Ms, "ms")
	r2.add("in godwit p99", gw.OwnP99Ms, "ms")
	if raw.Sustained > 0 && gw.Trials > 0 {
		r2.add("ratio", gw.Sustained/raw.Sustained, "")
	}
	r2.add("flood ratio", gw.RatePerSec/raw.RatePerSec, "")
	r2.add("start→first msg", gw.StartToFirstMsMs, "ms")
	r2.Note = fmt.Sprintf("latency: %d tracks msgs reflecting %d/%d scans; in godwit: arrival → hand-off to the MQTT client, its health latency_ms after the phase; flood of %d: %d never reached godwit (broker), %d dropped by godwit's queue (oldest first), %d ingested, %d tracks msgs; sustained: %d trials; godwit ran %s",
		gw.Received, gw.Reflected, gw.Sent, gw.FloodSent, uint64(gw.FloodSent)-min(gw.FloodPushed, uint64(gw.FloodSent)), gw.FloodDropped, gw.FloodIngested, gw.FloodReceived, gw.Trials, gw.Where)
	r3 := Row{Section: "mqtt", Name: fmt.Sprintf("raw paho pub → sub, %d B msgs", big.MsgBytes)}
	r3.add("p50", big.P50Ms, "ms")
	r3.add("p99", big.P99Ms, "ms")
	r3.Note = fmt.Sprintf("the raw path again with sensor messages padded to the size of godwit's tracks messages; latency at %g msg/s QoS %d: %d/%d received",
		o.Rate, o.QoS, big.Reflected, big.Sent)
	return []Row{r1, r2, r3}, nil
}

// trialResult is one paced run of the sustained-rate search.
type trialResult struct {
	kept     bool
	sent     int
	taken    int64
	lateness time.Duration // last receipt after the last publish
}

// keepUpSlack is how long after the last publish of a trial the last
// message may be taken and still count as kept up with: a path that needs
// longer is building a backlog, which at that rate would grow without
// bound.
const keepUpSlack = 50 * time.Millisecond

// trial publishes at rate for d in 1 ms batches and reports whether the
// path took every message (taken counts what the far end took) with no
// more than keepUpSlack of backlog at the end. A publisher that cannot
// itself hold the rate fails the trial too.
func trial(ctx context.Context, pub paho.Client, topic string, sp *scanPayload, rate float64, d time.Duration, taken func() int64) (trialResult, error) {
	n := int(rate * d.Seconds())
	base := taken()
	start := time.Now()
	sent := 0
	var last paho.Token
	for sent < n {
		if ctx.Err() != nil {
			return trialResult{}, ctx.Err()
		}
		due := min(n, int(rate*time.Since(start).Seconds())+1)
		for ; sent < due; sent++ {
			b, err := sp.next()
			if err != nil {
				return trialResult{}, err
			}
			last = pub.Publish(topic, 0, false, b)
		}
		time.Sleep(time.Millisecond)
	}
	if last != nil {
		last.WaitTimeout(5 * time.Second)
	}
	lastPub := time.Now()
	spent := lastPub.Sub(start)
	var lastTake time.Time
	prev := taken()
	settle(func() int64 {
		c := taken()
		if c != prev {
			prev, lastTake = c, time.Now()
		}
		return c - base
	}, int64(n), 200*time.Millisecond)
	r := trialResult{sent: n, taken: taken() - base}
	if !lastTake.IsZero() {
		r.lateness = max(0, lastTake.Sub(lastPub))
	}
	r.kept = r.taken >= int64(n) && r.lateness <= keepUpSlack && spent <= d+d/20+keepUpSlack
	return r, nil
}

// sustainedRate searches for the highest paced rate the path takes in full
// (trial): doubling from 4000 msg/s until a rate fails twice in a row,
// then four bisections, so the answer is within about 6 % below the true
// limit. It returns the rate and the number of trials.
func sustainedRate(try func(rate float64) (trialResult, error)) (float64, int, error) {
	lo, hi := 0.0, 0.0
	trials := 0
	// A rate fails only if two trials in a row fail: one stall of the
	// machine or the broker must not end the search.
	kept := func(rate float64) (bool, error) {
		for i := 0; i < 2; i++ {
			trials++
			res, err := try(rate)
			if err != nil || res.kept {
				return res.kept, err
			}
		}
		return false, nil
	}
	for r := 4000.0; r <= 1e6; r *= 2 {
		ok, err := kept(r)
		if err != nil {
			return 0, trials, err
		}
		if !ok {
			hi = r
			break
		}
		lo = r
	}
	if hi == 0 {
		return lo, trials, nil
	}
	for i := 0; i < 4; i++ {
		mid := (lo + hi) / 2
		ok, err := kept(mid)
		if err != nil {
			return lo, trials, err
		}
		if ok {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo, trials, nil
}

// healthWatch keeps the godwit path's health messages' latency_ms.
type healthWatch struct {
	mu       sync.Mutex
	at       time.Time
	p50, p99 float64
	p        fastjson.Parser
}

func (h *healthWatch) handle(_ paho.Client, m paho.Message) {
	h.mu.Lock()
	defer h.mu.Unlock()
	v, err := h.p.ParseBytes(m.Payload())
	if err != nil {
		return
	}
	l := v.Get("latency_ms")
	if l == nil {
		return
	}
	h.at, h.p50, h.p99 = time.Now(), l.GetFloat64("p50"), l.GetFloat64("p99")
}

// after waits up to wait for a health message received after t and
// returns its latency_ms (NaN when none came).
func (h *healthWatch) after(t time.Time, wait time.Duration) (p50, p99 float64) {
	for end := time.Now().Add(wait); ; time.Sleep(10 * time.Millisecond) {
		h.mu.Lock()
		at, p50, p99 := h.at, h.p50, h.p99
		h.mu.Unlock()
		if at.After(t) {
			return p50, p99
		}
		if time.Now().After(end) {
			return math.NaN(), math.NaN()
		}
	}
}
