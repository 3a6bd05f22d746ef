package resilience

import (
	"context"
	"os"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/valyala/fastjson"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/bench"
	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/transport/mqtt"
)

// running is a daemon under test.
type running struct {
	d    *daemon.Daemon
	stop context.CancelFunc
	done chan error
}

// startDaemon runs a daemon with a short reconnect backoff (20–200 ms),
// then tune when set.
func startDaemon(t *testing.T, cfg *configs.Config, tune func(*mqtt.Options)) *running {
	t.Helper()
	d, err := daemon.New(daemon.Options{Config: cfg, HealthPeriod: 100 * time.Millisecond,
		MQTT: func(o *mqtt.Options) {
			o.MinBackoff, o.MaxBackoff = 20*time.Millisecond, 200*time.Millisecond
			if tune != nil {
				tune(o)
			}
		}})
	if err != nil {
		t.Fatal(err)
	}
	ctx, stop := context.WithCancel(context.Background())
	r := &running{d: d, stop: stop, done: make(chan error, 1)}
	go func() { r.done <- d.Run(ctx) }()
	return r
}

// close stops the daemon and checks it returned cleanly.
func (r *running) close(t *testing.T) {
	t.Helper()
	r.stop()
	select {
	case err := <-r.done:
		if err != nil {
			t.Errorf("daemon Run: %v", err)
		}
	case <-time.After(10 * time.Second):
		t.Error("daemon did not stop within 10 s")
	}
}

// seen is one tracks or health message a consumer received.
type seen struct {
	rxNs   int64
	tNs    int64
	tracks int
	state  string
	codes  []string
	bad    bool // a null (non-finite value) or a position farther than 1 km
}

// consumer subscribes to the bench post's tracks and health topics.
type consumer struct {
	c      *mqtt.Client
	mu     sync.Mutex
	tracks []seen
	health []seen
	nT     atomic.Int64
	p      fastjson.Parser
}

func newConsumer(t *testing.T, url string) *consumer {
	t.Helper()
	c, err := mqtt.New(mqtt.Options{URL: url, ClientID: "resilience-consumer", CleanSession: true,
		MinBackoff: 20 * time.Millisecond, MaxBackoff: 200 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	k := &consumer{c: c}
	// QoS 1: a daemon publishing at QoS 1 then reaches the consumer at
	// QoS 1, which a broker may not drop for a busy subscriber.
	if err := c.Subscribe(bench.TracksTopic, 1, k); err != nil {
		t.Fatal(err)
	}
	if err := c.Subscribe(bench.HealthTopic, 1, k); err != nil {
		t.Fatal(err)
	}
	c.Start()
	if !c.WaitConnected(5 * time.Second) {
		t.Fatal("consumer did not connect")
	}
	return k
}

// Push implements mqtt.Sink; it parses at once, so nothing of payload is kept.
func (k *consumer) Push(topic string, payload []byte, _ byte, _ bool, arrivalNs int64) bool {
	k.mu.Lock()
	defer k.mu.Unlock()
	v, err := k.p.ParseBytes(payload)
	if err != nil {
		return true
	}
	s := seen{rxNs: arrivalNs, tNs: v.GetInt64("t_ns")}
	if topic == bench.TracksTopic {
		s.bad = strings.Contains(string(payload), "null")
		for _, tr := range v.GetArray("tracks") {
			s.tracks++
			for _, p := range tr.GetArray("pos") {
				if f := p.GetFloat64(); f > 1000 || f < -1000 {
					s.bad = true
				}
			}
		}
		k.tracks = append(k.tracks, s)
		k.nT.Add(1)
		return true
	}
	s.state = string(v.GetStringBytes("state"))
	for _, a := range v.GetArray("alerts") {
		s.codes = append(s.codes, string(a.GetStringBytes("code")))
	}
	k.health = append(k.health, s)
	return true
}

func (k *consumer) snapshot() (tracks, health []seen) {
	k.mu.Lock()
	defer k.mu.Unlock()
	return append([]seen(nil), k.tracks...), append([]seen(nil), k.health...)
}

// healthSince lists the health messages received after rxNs.
func (k *consumer) healthSince(rxNs int64) []seen {
	_, h := k.snapshot()
	var out []seen
	for _, s := range h {
		if s.rxNs > rxNs {
			out = append(out, s)
		}
	}
	return out
}

func hasCode(s seen, code string) bool {
	for _, c := range s.codes {
		if c == code {
			return true
		}
	}
	return false
}

// waitFor polls cond every 10 ms up to d.
func waitFor(d time.Duration, cond func() bool) bool {
	end := time.Now().Add(d)
	for time.Now().Before(end) {
		if cond() {
			return true
		}
		time.Sleep(10 * time.Millisecond)
	}
	return cond()
}

// feeder publishes the live scene at a steady rate from one goroutine:
// lidar and radar alternately, each stamped with the wall clock.
type feeder struct {
	pub     *mqtt.Client
	scene   *bench.Live
	period  atomic.Int64 // ns between messages
	pause   atomic.Bool  // radar silent while set
	hold    atomic.Bool  // both silent while set
	lastTNs atomic.Int64 // t_ns of the newest message sent
	jump    atomic.Int64 // added to the radar's t_ns
	sent    atomic.Int64
	failed  atomic.Int64
	stop    chan struct{}
	stopped chan struct{}
}

func startFeeder(t *testing.T, url string, qos byte, targets int, period time.Duration) *feeder {
	t.Helper()
	pub, err := mqtt.New(mqtt.Options{URL: url, ClientID: "resilience-feeder", CleanSession: true, QoS: qos,
		MinBackoff: 20 * time.Millisecond, MaxBackoff: 200 * time.Millisecond, ConnectTimeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	pub.Start()
	if !pub.WaitConnected(5 * time.Second) {
		t.Fatal("feeder did not connect")
	}
	f := &feeder{pub: pub, scene: bench.NewLive(targets, 1, 11), stop: make(chan struct{}), stopped: make(chan struct{})}
	f.period.Store(int64(period))
	go f.run(qos)
	return f
}

func (f *feeder) run(qos byte) {
	defer close(f.stopped)
	radar := false
	for {
		select {
		case <-f.stop:
			return
		case <-time.After(time.Duration(f.period.Load())):
		}
		radar = !radar
		if f.hold.Load() || radar && f.pause.Load() {
			continue
		}
		topic, tNs := bench.LidarTopic, time.Now().UnixNano()
		if radar {
			topic, tNs = bench.RadarTopic, tNs+f.jump.Load()
		}
		b, err := f.scene.Next(radar, tNs)
		if err == nil {
			err = f.pub.Publish(topic, b, qos, false)
		}
		if err != nil {
			f.failed.Add(1)
		} else {
			f.sent.Add(1)
			f.lastTNs.Store(tNs)
		}
	}
}

func (f *feeder) close() {
	close(f.stop)
	<-f.stopped
	f.pub.Close()
}

// soakDuration is GODWIT_SOAK when set (e.g. 5m), else def.
func soakDuration(t *testing.T, def time.Duration) time.Duration {
	if s := os.Getenv("GODWIT_SOAK"); s != "" {
		d, err := time.ParseDuration(s)
		if err != nil || d <= 0 {
			t.Fatalf("GODWIT_SOAK=%q: want a positive duration such as 5m", s)
		}
		return d
	}
	return def
}
