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

	"github.com/godwit-fusion/godwit/runtime/daemon"
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
}

// PathResult is one MQTT path measured: latency at a fixed rate and the
// sustained rate under a flood.
type PathResult struct {
	Sent, Received   int     // latency phase
	P50Ms, P99Ms     float64 // publish stamp → receipt, nearest rank
	FloodSent        int
	FloodReceived    int     // at the subscriber (godwit: tracks messages)
	FloodIngested    uint64  // godwit only: messages the pipeline took
	FloodDropped     uint64  // godwit only: dropped by the daemon's queue
	FloodPushed      uint64  // godwit only: reached the daemon's queue
	RatePerSec       float64 // sustained: received (godwit: ingested) ÷ time
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

// next stamps the message with the wall clock now and encodes it.
func (s *scanPayload) next() ([]byte, error) {
	s.m.Seq++
	s.m.TNs = time.Now().UnixNano()
	var err error
	s.buf, err = transport.AppendMeasurement(s.buf[:0], &s.m)
	// paho keeps the payload until written: hand it its own copy.
	return append([]byte(nil), s.buf...), err
}

// receiver records, for every message on its topic, now − t_ns.
type receiver struct {
	mu     sync.Mutex
	lat    []float64 // ms
	tracks int       // tracks in the newest message
	count  atomic.Int64
	last   atomic.Int64 // wall ns of the newest receipt
	keep   atomic.Bool
	p      fastjson.Parser
}

func (r *receiver) handle(_ paho.Client, m paho.Message) {
	now := time.Now().UnixNano()
	r.count.Add(1)
	r.last.Store(now)
	if !r.keep.Load() {
		// Count the tracks of the newest message only (the process row).
		r.mu.Lock()
		r.tracks = bytes.Count(m.Payload(), []byte(`"id":`))
		r.mu.Unlock()
		return
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	v, err := r.p.ParseBytes(m.Payload())
	if err != nil {
		return
	}
	if t := v.GetInt64("t_ns"); t > 0 {
		r.lat = append(r.lat, float64(now-t)*1e-6)
	}
}

func (r *receiver) lastTracks() int {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.tracks
}

func (r *receiver) reset(keep bool) {
	r.mu.Lock()
	r.lat = r.lat[:0]
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
func paced(ctx context.Context, pub paho.Client, topic string, qos byte, sp *scanPayload, rate float64, d time.Duration) (int, error) {
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
	var res PathResult
	rcv.reset(true)
	if res.Sent, err = paced(ctx, pub, topic, o.QoS, sp, o.Rate, o.Latency); err != nil {
		return res, err
	}
	settle(func() int64 { return rcv.count.Load() }, int64(res.Sent), time.Second)
	res.Received = int(rcv.count.Load())
	res.P50Ms, res.P99Ms = rcv.quantiles()

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
	return res, nil
}

// GodwitPath measures publisher → godwit daemon → subscriber on the same
// broker, with output.rate_hz 0: every processed scan publishes a tracks
// message stamped with the scan's t_ns, which is the publish time the
// publisher wrote into the sensor message.
func GodwitPath(ctx context.Context, o MQTTOptions) (PathResult, error) {
	o.defaults()
	cfg, err := Config(ConfigParams{BrokerURL: o.BrokerURL, QoS: int(o.QoS), RateHz: 0,
		ClientID: fmt.Sprintf("godwit-bench-%d", time.Now().UnixNano()), LidarMS: 1000 / o.Rate, QueueLen: 4096})
	if err != nil {
		return PathResult{}, err
	}
	d, err := daemon.New(daemon.Options{Config: cfg, HealthPeriod: time.Second})
	if err != nil {
		return PathResult{}, err
	}
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
	dctx, stop := context.WithCancel(ctx)
	done := make(chan error, 1)
	sp := newScanPayload(o.Targets)
	var res PathResult
	start := time.Now()
	go func() { done <- d.Run(dctx) }()
	defer func() { stop(); <-done }()
	// Start → subscribed: probe every millisecond until the pipeline has
	// taken a message (so the figure is at most 1 ms pessimistic).
	for d.Stats().Pipeline.Messages == 0 {
		if time.Since(start) > 10*time.Second {
			return res, errors.New("bench: godwit did not take a message within 10 s of starting")
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
	if res.Sent, err = paced(ctx, pub, LidarTopic, o.QoS, sp, o.Rate, o.Latency); err != nil {
		return res, err
	}
	settle(func() int64 { return rcv.count.Load() }, int64(res.Sent), time.Second)
	res.Received = int(rcv.count.Load())
	res.P50Ms, res.P99Ms = rcv.quantiles()

	rcv.reset(false)
	s0 := d.Stats()
	t0 := time.Now()
	if err := flood(pub, LidarTopic, o.QoS, sp, o.Flood); err != nil {
		return res, err
	}
	var lastIngest time.Time
	prev := s0.Pipeline.Messages
	settle(func() int64 {
		m := d.Stats().Pipeline.Messages
		if m != prev {
			prev, lastIngest = m, time.Now()
		}
		return int64(m - s0.Pipeline.Messages)
	}, int64(o.Flood), time.Second)
	settle(func() int64 { return rcv.count.Load() }, int64(o.Flood), 500*time.Millisecond)
	s1 := d.Stats()
	res.FloodSent, res.FloodReceived = o.Flood, int(rcv.count.Load())
	res.FloodIngested = s1.Pipeline.Messages - s0.Pipeline.Messages
	res.FloodDropped = s1.QueueDropped - s0.QueueDropped
	res.FloodPushed = s1.QueuePushed - s0.QueuePushed
	if el := lastIngest.Sub(t0); el > 0 {
		res.RatePerSec = float64(res.FloodIngested) / el.Seconds()
	}
	return res, nil
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
	r1 := Row{Section: "mqtt", Name: fmt.Sprintf("raw paho pub → sub, %d dets/msg", o.Targets)}
	r1.add("p50", raw.P50Ms, "ms")
	r1.add("p99", raw.P99Ms, "ms")
	r1.add("sustained", raw.RatePerSec, "msg/s")
	r1.Note = fmt.Sprintf("latency at %g msg/s QoS %d: %d/%d received; flood %d/%d received",
		o.Rate, o.QoS, raw.Received, raw.Sent, raw.FloodReceived, raw.FloodSent)
	r2 := Row{Section: "mqtt", Name: "pub → godwit (rate_hz 0) → sub"}
	r2.add("p50", gw.P50Ms, "ms")
	r2.add("p99", gw.P99Ms, "ms")
	r2.add("sustained", gw.RatePerSec, "msg/s")
	r2.add("added p99", gw.P99Ms-raw.P99Ms, "ms")
	r2.add("ratio", gw.RatePerSec/raw.RatePerSec, "")
	r2.add("start→first msg", gw.StartToFirstMsMs, "ms")
	r2.Note = fmt.Sprintf("latency: %d/%d tracks msgs; flood of %d: %d never reached godwit (broker), %d dropped by godwit's queue (oldest first), %d ingested, %d tracks msgs",
		gw.Received, gw.Sent, gw.FloodSent, uint64(gw.FloodSent)-min(gw.FloodPushed, uint64(gw.FloodSent)), gw.FloodDropped, gw.FloodIngested, gw.FloodReceived)
	return []Row{r1, r2}, nil
}
