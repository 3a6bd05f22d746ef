package daemon

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"
	"sync"
	"sync/atomic"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/mqtt"
	"github.com/prometheus/client_golang/prometheus"
	"go.uber.org/zap"
)

// Options configure a Daemon.
type Options struct {
	Config *configs.Config // validated (configs.Load)
	Logger *zap.Logger     // nil discards
	Engine engine.Options
	// MQTT, when set, adjusts the client options built from the
	// configuration, e.g. to shorten the reconnect backoff.
	MQTT func(*mqtt.Options)
	// HealthPeriod is the cadence of the retained health message; 0 means
	// 1 s (DESIGN.md).
	HealthPeriod time.Duration
	// AlertHold is no longer used: broker outages and queue overflows are
	// the engine's broker_disconnected and overrun alerts, held and
	// cleared by the health keys (raise_ms, clear_ms, event_hold_ms).
	//
	// Deprecated: kept so that existing callers still compile.
	AlertHold time.Duration
}

// Stats is a snapshot of the daemon's counters.
type Stats struct {
	Pipeline      PipelineStats
	Engine        engine.Counters
	MQTT          mqtt.Stats
	QueuePushed   uint64 // messages the callback handed over
	QueueDropped  uint64 // dropped because the engine fell behind (oldest first)
	Published     uint64 // tracks and health messages the broker took
	PublishErrors uint64 // tracks and health messages that could not be published
	Outages       uint64 // established broker connections lost
	LastOutage    time.Duration
}

// Daemon is godwit's live loop: MQTT in, the engine in one goroutine,
// tracks and health out.
//
// The MQTT callback only copies each message into a bounded queue (drop
// oldest on overflow), so a slow engine can never stall the connection.
// The engine goroutine pops, decodes and ingests with the arrival time the
// callback stamped, calls Advance on a ticker at output.rate_hz (or, with
// rate_hz 0, whenever the queue is empty after a processed scan, so scans
// behind a backlog share a message), and publishes tracks (QoS
// broker.qos) and health (retained, once per HealthPeriod). The client
// announces "online" (retained) on every connect, leaves "offline" as its
// last will, and reconnects with capped backoff; the daemon reports each
// outage in the log, in Stats and in the health message. Prometheus
// metrics (a registry per daemon) and the /healthz and /readyz probes are
// served on metrics.listen while Run runs.
type Daemon struct {
	opts  Options
	cfg   *configs.Config
	log   *zap.Logger
	pipe  *Pipeline
	queue *transport.Queue
	qos   byte

	events chan mqtt.Event

	mu   sync.Mutex
	snap Stats

	// Read by the HTTP endpoint's goroutines.
	metrics     *metrics
	liveClient  atomic.Pointer[mqtt.Client]
	stopping    atomic.Bool
	metricsAddr atomic.Pointer[string]
	ep          *endpoint

	// Engine goroutine only.
	client        *mqtt.Client
	in            transport.Inbound
	published     uint64
	publishErrors uint64
	outages       uint64
	lastOutage    time.Duration
	downSince     time.Time
	lastDropped   uint64 // queue drops already reported to the engine
	pubLimit      time.Time
	pubSuppressed uint64
	lat           latencies
	healthVersion uint64 // engine.HealthState's version at the last health message
	held          int    // rate_hz 0: scans processed since the last tracks message
	heldSince     int64  // when the oldest of them was processed
	out           outRing
}

// outRing holds the tracks messages handed to the MQTT client and not yet
// complete, oldest first. The engine goroutine does not wait for each
// broker acknowledgement (issue 7): it waits only when every slot is in
// flight, which is the back-pressure on a slow broker. A slot holds the
// buffer paho is reading; completed buffers go on a stack of spares, and
// the pipeline takes the one freed last, so only as many buffers grow to a
// tracks message's size as are ever in flight at once (usually one or two,
// not outSlots: with 500 tracks a message is a few hundred kB).
type outRing struct {
	slots   [outSlots]outSlot
	head, n int
	spare   [][]byte // completed buffers, most recently freed last
}

// outSlots bounds the tracks messages in flight: enough to cover a
// round trip to a local broker at a few thousand scans per second, few
// enough that a stop waits for little.
const outSlots = 16

type outSlot struct {
	buf     []byte
	pending mqtt.Pending
}

// latencies keeps the ingest-to-publish latency of the last latencyWindow
// processed messages: from the arrival the MQTT callback stamped to the
// publication of the first tracks message that includes the message.
type latencies struct {
	obs     prometheus.Observer // the latency histogram, in seconds
	pending []int64             // arrival times processed since the last tracks message
	ring    [latencyWindow]float64
	n, next int
	scratch [latencyWindow]float64
}

const latencyWindow = 1024

func (l *latencies) arrived(arrivalNs int64) {
	if len(l.pending) < cap(l.pending) {
		l.pending = append(l.pending, arrivalNs)
	}
}

func (l *latencies) published(nowNs int64) {
	for _, a := range l.pending {
		l.ring[l.next] = float64(nowNs-a) * 1e-6
		if l.obs != nil {
			l.obs.Observe(float64(nowNs-a) * 1e-9)
		}
		l.next = (l.next + 1) % latencyWindow
		l.n = min(l.n+1, latencyWindow)
	}
	l.pending = l.pending[:0]
}

// summary is the median and the 99th percentile (nearest rank) in ms.
func (l *latencies) summary() transport.Latency {
	if l.n == 0 {
		return transport.Latency{}
	}
	s := l.scratch[:l.n]
	copy(s, l.ring[:l.n])
	sort.Float64s(s)
	rank := func(p float64) float64 { return s[min(l.n-1, int(math.Ceil(p*float64(l.n)))-1)] }
	return transport.Latency{P50: rank(0.50), P99: rank(0.99)}
}

// New builds the pipeline and the queue; Run connects. A Daemon runs once.
func New(opts Options) (*Daemon, error) {
	cfg := opts.Config
	if cfg == nil {
		return nil, fmt.Errorf("daemon: no configuration")
	}
	if opts.Logger == nil {
		opts.Logger = zap.NewNop()
	}
	if opts.HealthPeriod <= 0 {
		opts.HealthPeriod = time.Second
	}
	if cfg.Broker.QoS < 0 || cfg.Broker.QoS > 2 {
		return nil, fmt.Errorf("daemon: broker.qos %d, want 0, 1 or 2", cfg.Broker.QoS)
	}
	pipe, err := NewPipeline(cfg, opts.Engine, opts.Logger)
	if err != nil {
		return nil, err
	}
	maxBytes := cfg.Limits.MaxPayloadBytes
	if maxBytes <= 0 {
		maxBytes = transport.DefaultMaxPayloadBytes
	}
	d := &Daemon{
		opts: opts, cfg: cfg, log: opts.Logger, pipe: pipe,
		queue:  transport.NewQueue(max(cfg.Limits.QueueLength, 1), 1024, maxBytes),
		qos:    byte(cfg.Broker.QoS),
		events: make(chan mqtt.Event, 64),
		lat:    latencies{pending: make([]int64, 0, 4096)},
	}
	d.out.spare = make([][]byte, 0, outSlots+1)
	d.metrics = newMetrics(d)
	d.lat.obs = d.metrics.latency
	return d, nil
}

// mqttStats reads the client's counters (zero before Run); safe from any
// goroutine.
func (d *Daemon) mqttStats() mqtt.Stats {
	if c := d.liveClient.Load(); c != nil {
		return c.Stats()
	}
	return mqtt.Stats{}
}

// Stats returns the counters as of the engine goroutine's last step.
func (d *Daemon) Stats() Stats {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.snap
}

// clientOptions maps the configuration onto the MQTT client.
func (d *Daemon) clientOptions() mqtt.Options {
	b := d.cfg.Broker
	o := mqtt.Options{
		URL: b.URL, ClientID: b.ClientID, CleanSession: !b.PersistentSession, QoS: d.qos,
		Username: b.Username, PasswordFile: b.PasswordFile,
		CAFile: b.TLS.CA, CertFile: b.TLS.Cert, KeyFile: b.TLS.Key,
		StatusTopic: d.cfg.Output.StatusTopic,
		Logger:      d.log,
		OnState: func(e mqtt.Event) {
			// Never block the client's goroutine; the counters in
			// mqtt.Stats stay exact even if an event is lost here.
			select {
			case d.events <- e:
			default:
			}
		},
	}
	if d.opts.MQTT != nil {
		d.opts.MQTT(&o)
	}
	return o
}

// coalesceNs bounds how long, with rate_hz 0, processed scans wait for the
// queue to empty before their tracks message goes out anyway.
const coalesceNs = int64(5 * time.Millisecond)

// closed is always ready: it keeps the loop draining while the queue
// still holds messages after a bounded batch.
var closed = func() chan struct{} { c := make(chan struct{}); close(c); return c }()

// Run connects and serves until ctx is cancelled, then stops gracefully:
// it processes what is queued, publishes the last output and health,
// announces "offline" and disconnects. It returns nil after a graceful
// stop and an error only when it could not start.
//
// With metrics.listen set, Run also serves /metrics, /healthz and /readyz
// there until it returns. An address that cannot be bound is logged as an
// error and the daemon runs on without the endpoint: the fused tracks
// matter more than their metrics.
func (d *Daemon) Run(ctx context.Context) error {
	client, err := mqtt.New(d.clientOptions())
	if err != nil {
		return err
	}
	d.client = client
	for _, f := range d.pipe.Topics() {
		if err := client.Subscribe(f, d.qos, d.queue); err != nil {
			client.Close()
			return err
		}
	}
	d.liveClient.Store(client)
	if addr := d.cfg.Metrics.Listen; addr != "" {
		if ep, err := startEndpoint(addr, d); err != nil {
			d.log.Error("metrics endpoint not started; running without /metrics, /healthz and /readyz",
				zap.String("metrics.listen", addr), zap.Error(err))
		} else {
			d.ep = ep
			a := ep.ln.Addr().String()
			d.metricsAddr.Store(&a)
			d.log.Info("metrics endpoint listening", zap.String("addr", a))
		}
	}
	client.Start()
	d.log.Info("godwit daemon starting", zap.String("vehicle", d.cfg.Vehicle),
		zap.Strings("subscriptions", d.pipe.Topics()), zap.String("tracks_topic", d.cfg.Output.TracksTopic))

	var tick <-chan time.Time
	if period := d.pipe.RatePeriodNs(); period > 0 {
		t := time.NewTicker(time.Duration(period))
		defer t.Stop()
		tick = t.C
	}
	health := time.NewTicker(d.opts.HealthPeriod)
	defer health.Stop()

	pending := false
	for {
		ready := d.queue.Ready()
		if pending {
			ready = closed
		}
		select {
		case <-ctx.Done():
			d.stop()
			return nil
		case <-ready:
			pending = d.drain(d.queue.Cap())
		case now := <-tick:
			d.advance(now.UnixNano())
		case now := <-health.C:
			d.publishHealth(now)
		case e := <-d.events:
			d.onEvent(e)
		}
		d.harvest()
		// A change of state or alerts goes out at once, not at the next
		// health tick (issue 5).
		if _, v := d.pipe.Engine().HealthState(); v != d.healthVersion {
			d.publishHealth(time.Now())
		}
		d.snapshot()
	}
}

// stop is the graceful end: drain, last output, offline, disconnect.
func (d *Daemon) stop() {
	d.stopping.Store(true)
	// One queue's worth is everything queued at the moment of the stop;
	// what a flood adds after that is not waited for.
	d.drain(d.queue.Cap())
	now := time.Now()
	if !d.pipe.PerScan() || d.held > 0 {
		d.advance(now.UnixNano())
	}
	d.publishHealth(now)
	d.waitOutput()   // every tracks message in flight completes before "offline"
	d.client.Close() // publishes "offline" (retained) while connected
	d.snapshot()
	if d.ep != nil {
		d.metricsAddr.Store(nil)
		d.ep.shutdown()
	}
	d.log.Info("godwit daemon stopped", zap.Uint64("messages", d.pipe.Stats().Messages))
}

// drain processes up to limit queued messages and reports whether more are
// waiting. This is the ingest path: Pop swaps buffers, Decode and Ingest
// reuse theirs, so a warm daemon allocates nothing here per message.
func (d *Daemon) drain(limit int) bool {
	for i := 0; i < limit; i++ {
		if !d.queue.Pop(&d.in) {
			return false
		}
		t0 := time.Now()
		err := d.pipe.Handle(d.in.Topic, d.in.Payload, d.in.ArrivalNs)
		d.metrics.handled(d.pipe.last, time.Since(t0))
		if err == nil {
			d.lat.arrived(d.in.ArrivalNs)
			if d.held == 0 {
				// From when the scan was processed, not when it arrived:
				// behind a backlog every arrival is already old.
				d.heldSince = t0.UnixNano()
			}
			d.held++
		}
		// rate_hz 0: a tracks message once the queue is empty, so one per
		// scan while the daemon keeps up. Behind a backlog, the scans
		// processed meanwhile share one message (each would be stale by
		// the time it went out), at least every coalesceNs.
		if d.held > 0 && d.pipe.PerScan() && (d.queue.Len() == 0 || t0.UnixNano()-d.heldSince >= coalesceNs) {
			d.held = 0
			d.advance(d.in.ArrivalNs)
		}
		// The engine's overrun watchdog judges the step (with its output)
		// and what is still waiting, and any messages the queue dropped.
		d.reportDrops()
		d.pipe.Engine().ReportLoad(d.queue.Len(), d.queue.Cap(), int64(time.Since(t0)))
	}
	return d.queue.Len() > 0
}

func (d *Daemon) advance(nowNs int64) {
	t0 := time.Now()
	b, ok := d.pipe.Advance(nowNs)
	if !ok {
		return
	}
	d.metrics.tracksOut(d.pipe.LastTracks(), time.Since(t0))
	if d.publishTracks(b) {
		// Latency is taken at the hand-off to the MQTT client, the last
		// step the daemon controls; the acknowledgement is the broker's.
		d.lat.published(time.Now().UnixNano())
	}
}

// publishTracks hands b (the pipeline's tracks buffer) to the MQTT client
// without waiting for the broker. The buffer moves into a ring slot and the
// pipeline gets the slot's previous buffer, once that publish is complete.
func (d *Daemon) publishTracks(b []byte) bool {
	r := &d.out
	d.harvest()
	if r.n == len(r.slots) {
		d.finish(true) // back-pressure: the oldest publish must complete
	}
	s := &r.slots[(r.head+r.n)%len(r.slots)]
	p, err := d.client.PublishAsync(d.cfg.Output.TracksTopic, b, d.qos, false)
	if err != nil {
		// Not handed over: the pipeline keeps its buffer.
		d.publishFailed(kindTracks, d.cfg.Output.TracksTopic, err)
		return false
	}
	// paho reads b until the publish completes; the pipeline encodes the
	// next message into the spare freed last, or a new buffer while the
	// ring warms up.
	s.buf, s.pending = b, p
	if k := len(r.spare); k > 0 {
		d.pipe.tbuf, r.spare = r.spare[k-1][:0], r.spare[:k-1]
	} else {
		d.pipe.tbuf = make([]byte, 0, cap(b))
	}
	r.n++
	return true
}

// harvest counts the tracks publishes that have completed, oldest first,
// without waiting.
func (d *Daemon) harvest() {
	for d.out.n > 0 && d.out.slots[d.out.head].pending.Done() {
		d.finish(false)
	}
}

// finish counts the oldest publish in flight, waiting for it when wait is
// set, and frees its slot. A failed or timed-out publish may still be held
// (or resent from the session store) by paho: its buffer is given up.
func (d *Daemon) finish(wait bool) {
	r := &d.out
	s := &r.slots[r.head]
	var err error
	switch {
	case s.pending.Done():
		err = s.pending.Err()
	case wait:
		err = d.client.Wait(s.pending)
	default:
		err = errAbandoned
	}
	if err == nil {
		d.published++
		d.metrics.published[kindTracks].Inc()
		r.spare = append(r.spare, s.buf[:0])
	} else {
		// paho may still hold s.buf: never reuse it.
		d.publishFailed(kindTracks, d.cfg.Output.TracksTopic, err)
	}
	s.buf, s.pending = nil, mqtt.Pending{}
	r.head = (r.head + 1) % len(r.slots)
	r.n--
}

var errAbandoned = errors.New("daemon: tracks publish not complete when the daemon stopped without a connection")

// waitOutput waits for every tracks publish in flight, in order. Without a
// connection (a persistent session keeps paho's tokens open until a
// reconnect that will not come) what has not completed is counted as
// failed rather than waited for, one connect timeout per message.
func (d *Daemon) waitOutput() {
	for d.out.n > 0 {
		d.finish(d.client.Connected())
	}
}

func (d *Daemon) publish(kind int, topic string, b []byte, retain bool) bool {
	err := d.client.Publish(topic, b, d.qos, retain)
	if err == nil {
		d.published++
		d.metrics.published[kind].Inc()
		return true
	}
	// A timed-out publish may still be queued inside the MQTT library with
	// our buffer; never write into that buffer again.
	d.pipe.releaseBuffers()
	d.publishFailed(kind, topic, err)
	return false
}

// publishFailed counts a publish that failed and logs it, rate-limited.
func (d *Daemon) publishFailed(kind int, topic string, err error) {
	d.publishErrors++
	d.metrics.publishErrors[kind].Inc()
	if now := time.Now(); now.Sub(d.pubLimit) >= time.Second {
		d.log.Warn("publish failed", zap.String("topic", topic), zap.Error(err),
			zap.Uint64("suppressed_since_last", d.pubSuppressed))
		d.pubLimit, d.pubSuppressed = now, 0
	} else {
		d.pubSuppressed++
	}
}

// reportDrops hands the queue's new drops to the engine, whose overrun
// alert reports them (the queue counts them; the metrics keep the total).
func (d *Daemon) reportDrops() {
	if dropped := d.queue.Dropped(); dropped > d.lastDropped {
		d.pipe.Engine().ReportDropped(dropped - d.lastDropped)
		d.lastDropped = dropped
	}
}

func (d *Daemon) publishHealth(now time.Time) {
	// Evaluated even while disconnected, so the engine's broker watchdog
	// and the health metrics move on; the message waits for the broker.
	// Outages and overflows are the engine's broker_disconnected and
	// overrun alerts.
	d.reportDrops()
	connected := d.client.Connected()
	d.pipe.Engine().ReportBroker(connected)
	d.pipe.latency = d.lat.summary()
	b := d.pipe.Health(now.UnixNano(), nil)
	_, d.healthVersion = d.pipe.Engine().HealthState()
	d.metrics.healthOut(d.pipe.health.State, len(d.pipe.health.Alerts))
	if !connected {
		return // nothing to publish to; the next health after reconnect reports it
	}
	d.publish(kindHealth, d.cfg.Output.HealthTopic, b, true)
}

func (d *Daemon) onEvent(e mqtt.Event) {
	switch e.Kind {
	case mqtt.Disconnected:
		d.pipe.Engine().ReportBrokerAt(false, e.At.UnixNano())
		d.outages++
		d.downSince = e.At
		d.log.Warn("broker connection lost; reconnecting", zap.Error(e.Err), zap.Uint64("outages", d.outages))
	case mqtt.Connected:
		d.pipe.Engine().ReportBrokerAt(true, e.At.UnixNano())
		if !d.downSince.IsZero() {
			d.lastOutage = e.At.Sub(d.downSince)
			d.downSince = time.Time{}
			d.log.Info("broker connection back", zap.Duration("outage", d.lastOutage))
		}
		// Tell the fleet at once (state, and any outage) rather than at the
		// next health tick.
		d.publishHealth(time.Now())
	}
}

func (d *Daemon) snapshot() {
	s := Stats{
		Pipeline:      d.pipe.Stats(),
		Engine:        d.pipe.Engine().Counters(),
		QueuePushed:   d.queue.Pushed(),
		QueueDropped:  d.queue.Dropped(),
		Published:     d.published,
		PublishErrors: d.publishErrors,
		Outages:       d.outages,
		LastOutage:    d.lastOutage,
	}
	if d.client != nil {
		s.MQTT = d.client.Stats()
	}
	d.metrics.sensorCounters(d.pipe.Engine())
	d.mu.Lock()
	d.snap = s
	d.mu.Unlock()
}
