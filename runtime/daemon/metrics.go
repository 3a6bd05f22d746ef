package daemon

import (
	"time"

	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/transport"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
)

// Health states in the order of the health message's state values; the
// index is what healthState sets to 1.
var healthStates = [...]string{"ok", "degraded", "failed"}

// Track statuses of the tracks message (DESIGN.md, v1).
var trackStatuses = [...]string{"tentative", "confirmed", "coasting"}

// Published message kinds.
const (
	kindTracks = iota
	kindHealth
)

var publishKinds = [...]string{"tracks", "health"}

// metrics is the daemon's Prometheus instrumentation, on a registry of its
// own so that several daemons can live in one process (tests, embedding).
//
// Every labelled child is resolved once here: on the ingest path an update
// is an atomic add on a counter the daemon already holds, never a label
// lookup, so a message costs no allocation. Values owned by other
// goroutines' atomics (queue, MQTT client) are read at scrape time instead.
type metrics struct {
	reg *prometheus.Registry

	// Per sensor index; the extra last entry is sensor="" (not attributable).
	received []prometheus.Counter
	rejected [][]prometheus.Counter // [sensor][reason index]
	late     []prometheus.Counter
	lost     []prometheus.Counter
	lostSeen []uint64 // engine's lost counts already added
	sensors  []engine.SensorStats

	tracks        [len(trackStatuses)]prometheus.Gauge
	latency       prometheus.Histogram
	stepIngest    prometheus.Observer
	stepAdvance   prometheus.Observer
	published     [len(publishKinds)]prometheus.Counter
	publishErrors [len(publishKinds)]prometheus.Counter
	health        [len(healthStates)]prometheus.Gauge
	alerts        prometheus.Gauge
}

// Histogram buckets in seconds. Ingest to publish is bounded below by the
// decode and above by the output period (50 ms at 20 Hz) plus broker
// round trips; an engine step runs from microseconds (a scan, no tracks)
// to milliseconds (a rewind over the lag window).
var (
	latencyBuckets = []float64{0.0001, 0.00025, 0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1}
	stepBuckets    = prometheus.ExponentialBuckets(1e-6, 4, 10) // 1 µs … 262 ms
)

func newMetrics(d *Daemon) *metrics {
	cfg := d.cfg
	reg := prometheus.NewRegistry()
	f := factory{reg}
	m := &metrics{reg: reg}

	received := f.counterVec("godwit_measurements_received_total",
		"Measurement messages received on the sensors' topics, by sensor (\"\": rejected on a topic several sensors share, so not attributable).",
		"sensor")
	rejected := f.counterVec("godwit_measurements_rejected_total",
		"Measurement messages refused whole, by sensor and reason code (the health message's counters.rejected codes).",
		"sensor", "reason")
	late := f.counterVec("godwit_measurements_late_dropped_total",
		"Measurement messages dropped because they were older than the lag window, by sensor.", "sensor")
	lost := f.counterVec("godwit_measurements_lost_total",
		"Measurement messages missing from a sensor's seq sequence (gaps), by sensor.", "sensor")
	names := make([]string, 0, len(cfg.Sensors)+1)
	for _, s := range cfg.Sensors {
		names = append(names, s.Name)
	}
	names = append(names, "")
	for i, name := range names {
		m.received = append(m.received, received.WithLabelValues(name))
		row := make([]prometheus.Counter, len(rejectReasons))
		for r, reason := range rejectReasons {
			row[r] = rejected.WithLabelValues(name, reason)
		}
		m.rejected = append(m.rejected, row)
		if i < len(cfg.Sensors) {
			m.late = append(m.late, late.WithLabelValues(name))
			m.lost = append(m.lost, lost.WithLabelValues(name))
		}
	}
	m.lostSeen = make([]uint64, len(cfg.Sensors))
	m.sensors = make([]engine.SensorStats, 0, len(cfg.Sensors))

	tracks := f.gaugeVec("godwit_tracks",
		"Tracks in the latest tracks message, by status.", "status")
	for i, s := range trackStatuses {
		m.tracks[i] = tracks.WithLabelValues(s)
	}
	m.latency = f.histogram("godwit_ingest_to_publish_latency_seconds",
		"From a measurement's arrival (stamped in the MQTT callback) to the publication of the first tracks message that includes it.",
		latencyBuckets)
	step := f.histogramVec("godwit_engine_step_duration_seconds",
		"Time the engine goroutine spends per step: ingest (decode and Ingest of one message, rewinds included) or advance (predict and encode one tracks message).",
		stepBuckets, "step")
	m.stepIngest = step.WithLabelValues("ingest")
	m.stepAdvance = step.WithLabelValues("advance")

	published := f.counterVec("godwit_published_messages_total",
		"Messages the broker took, by kind.", "kind")
	pubErrors := f.counterVec("godwit_publish_errors_total",
		"Messages that could not be published, by kind.", "kind")
	for i, k := range publishKinds {
		m.published[i] = published.WithLabelValues(k)
		m.publishErrors[i] = pubErrors.WithLabelValues(k)
	}
	health := f.gaugeVec("godwit_health_state",
		"1 for the vehicle's current health state, 0 for the others (all 0 before the first evaluation).", "state")
	for i, s := range healthStates {
		m.health[i] = health.WithLabelValues(s)
	}
	m.alerts = f.gauge("godwit_health_alerts", "Alerts active in the latest health evaluation.")

	// Read at scrape time from values that are safe to read concurrently.
	q := d.queue
	f.gaugeFunc("godwit_queue_depth", "Received messages waiting for the engine goroutine.",
		func() float64 { return float64(q.Len()) })
	f.gaugeFunc("godwit_queue_capacity", "Most messages the queue holds (limits.queue_length).",
		func() float64 { return float64(q.Cap()) })
	f.counterFunc("godwit_queue_dropped_total", "Received messages dropped, oldest first, because the queue was full.",
		func() float64 { return float64(q.Dropped()) })
	f.gaugeFunc("godwit_broker_connected", "1 while connected to the broker with every subscription made, else 0.",
		func() float64 {
			if c := d.liveClient.Load(); c != nil && c.Connected() {
				return 1
			}
			return 0
		})
	f.counterFunc("godwit_broker_reconnects_total", "Successful connections to the broker after the first.",
		func() float64 { return float64(d.mqttStats().Reconnects) })
	f.counterFunc("godwit_broker_connect_failures_total", "Failed attempts to connect to the broker.",
		func() float64 { return float64(d.mqttStats().ConnectFailure) })
	// Engine counters, from the snapshot the engine goroutine takes after
	// every step (the engine itself is not safe for concurrent reads).
	eng := func(pick func(engine.Counters) uint64) func() float64 {
		return func() float64 { return float64(pick(d.Stats().Engine)) }
	}
	f.counterFunc("godwit_engine_rewinds_total", "Late measurements inside the lag window that made the engine rewind and re-process.",
		eng(func(c engine.Counters) uint64 { return c.Rewinds }))
	f.counterFunc("godwit_tracks_born_total", "Tracks started.", eng(func(c engine.Counters) uint64 { return c.Births }))
	f.counterFunc("godwit_tracks_deleted_total", "Tracks deleted by the tracker.", eng(func(c engine.Counters) uint64 { return c.Deletions }))
	f.counterFunc("godwit_engine_filter_errors_total", "Filter predict or update failures (the track dropped or the update skipped).",
		eng(func(c engine.Counters) uint64 { return c.FilterErrors }))
	info := f.gaugeVec("godwit_vehicle_info", "Always 1; the vehicle label is the configuration's vehicle.", "vehicle")
	info.WithLabelValues(cfg.Vehicle).Set(1)

	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return m
}

// handled counts one message Handle processed and the time it took.
func (m *metrics) handled(h handled, took time.Duration) {
	if h.outcome == outcomeOtherTopic {
		return
	}
	s := h.sensor
	if s < 0 || s >= len(m.late) {
		s = len(m.received) - 1 // sensor=""
	}
	m.received[s].Inc()
	switch {
	case h.outcome == outcomeAccepted:
	case h.outcome == outcomeLate:
		if s < len(m.late) {
			m.late[s].Inc()
		}
	case h.outcome >= 0 && h.outcome < len(rejectReasons):
		m.rejected[s][h.outcome].Inc()
	}
	m.stepIngest.Observe(took.Seconds())
}

// tracksOut sets the tracks gauges from an emitted tracks message.
func (m *metrics) tracksOut(msg *transport.TracksMsg, took time.Duration) {
	var n [len(trackStatuses)]int
	for i := range msg.Tracks {
		for k, s := range trackStatuses {
			if msg.Tracks[i].Status == s {
				n[k]++
				break
			}
		}
	}
	for k := range n {
		m.tracks[k].Set(float64(n[k]))
	}
	m.stepAdvance.Observe(took.Seconds())
}

// healthOut sets the state gauges from the latest health evaluation.
func (m *metrics) healthOut(state string, alerts int) {
	for i, s := range healthStates {
		v := 0.0
		if s == state {
			v = 1
		}
		m.health[i].Set(v)
	}
	m.alerts.Set(float64(alerts))
}

// sensorCounters adds the engine's per-sensor sequence gaps since the last
// call (the engine counts them; a counter only goes up by the difference).
func (m *metrics) sensorCounters(e *engine.Engine) {
	m.sensors = e.Sensors(m.sensors)
	for i := range m.sensors {
		if i >= len(m.lost) {
			break
		}
		if lost := m.sensors[i].Lost; lost > m.lostSeen[i] {
			m.lost[i].Add(float64(lost - m.lostSeen[i]))
			m.lostSeen[i] = lost
		}
	}
}

// factory registers on one registry; a name clash is a programming error
// caught by every test, hence MustRegister.
type factory struct{ reg *prometheus.Registry }

func (f factory) counterVec(name, help string, labels ...string) *prometheus.CounterVec {
	v := prometheus.NewCounterVec(prometheus.CounterOpts{Name: name, Help: help}, labels)
	f.reg.MustRegister(v)
	return v
}

func (f factory) gaugeVec(name, help string, labels ...string) *prometheus.GaugeVec {
	v := prometheus.NewGaugeVec(prometheus.GaugeOpts{Name: name, Help: help}, labels)
	f.reg.MustRegister(v)
	return v
}

func (f factory) gauge(name, help string) prometheus.Gauge {
	g := prometheus.NewGauge(prometheus.GaugeOpts{Name: name, Help: help})
	f.reg.MustRegister(g)
	return g
}

func (f factory) histogram(name, help string, buckets []float64) prometheus.Histogram {
	h := prometheus.NewHistogram(prometheus.HistogramOpts{Name: name, Help: help, Buckets: buckets})
	f.reg.MustRegister(h)
	return h
}

func (f factory) histogramVec(name, help string, buckets []float64, labels ...string) *prometheus.HistogramVec {
	v := prometheus.NewHistogramVec(prometheus.HistogramOpts{Name: name, Help: help, Buckets: buckets}, labels)
	f.reg.MustRegister(v)
	return v
}

func (f factory) gaugeFunc(name, help string, fn func() float64) {
	f.reg.MustRegister(prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: name, Help: help}, fn))
}

func (f factory) counterFunc(name, help string, fn func() float64) {
	f.reg.MustRegister(prometheus.NewCounterFunc(prometheus.CounterOpts{Name: name, Help: help}, fn))
}
