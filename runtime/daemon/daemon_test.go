package daemon

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
	"github.com/godwit-fusion/godwit/transport/broker"
	"go.uber.org/goleak"
)

// The peer is a plain paho client standing for the sensor drivers and the
// consumers, independent of godwit's own MQTT client.
type peer struct {
	t    *testing.T
	c    paho.Client
	mu   sync.Mutex
	msgs []peerMsg
}

type peerMsg struct {
	topic    string
	payload  []byte
	retained bool
	at       time.Time
}

var testSeq atomic.Int64

func uniquePrefix() string {
	return fmt.Sprintf("gwtest-%d-%d-%d", os.Getpid(), time.Now().UnixNano()%1e9, testSeq.Add(1))
}

func newPeer(t *testing.T, url, id string) *peer {
	t.Helper()
	p := &peer{t: t}
	o := paho.NewClientOptions().AddBroker(url).SetClientID(id).SetCleanSession(true).
		SetAutoReconnect(false).SetConnectTimeout(3 * time.Second)
	p.c = paho.NewClient(o)
	if tok := p.c.Connect(); !tok.WaitTimeout(5*time.Second) || tok.Error() != nil {
		t.Fatalf("peer %s cannot connect to %s: %v", id, url, tok.Error())
	}
	return p
}

func (p *peer) sub(filter string) {
	p.t.Helper()
	tok := p.c.Subscribe(filter, 1, func(_ paho.Client, m paho.Message) {
		p.mu.Lock()
		p.msgs = append(p.msgs, peerMsg{m.Topic(), append([]byte(nil), m.Payload()...), m.Retained(), time.Now()})
		p.mu.Unlock()
	})
	if !tok.WaitTimeout(5*time.Second) || tok.Error() != nil {
		p.t.Fatalf("subscribe %s: %v", filter, tok.Error())
	}
}

func (p *peer) pub(topic string, payload []byte, retain bool) {
	tok := p.c.Publish(topic, 1, retain, payload)
	tok.WaitTimeout(3 * time.Second)
}

// await polls until some received message satisfies ok, or the timeout.
func (p *peer) await(timeout time.Duration, ok func(peerMsg) bool) (peerMsg, bool) {
	deadline := time.Now().Add(timeout)
	for {
		p.mu.Lock()
		for _, m := range p.msgs {
			if ok(m) {
				p.mu.Unlock()
				return m, true
			}
		}
		p.mu.Unlock()
		if time.Now().After(deadline) {
			return peerMsg{}, false
		}
		time.Sleep(10 * time.Millisecond)
	}
}

func (p *peer) close() { p.c.Disconnect(100) }

// liveConfig is the dock-post example on broker url with topics under a
// unique prefix, so parallel runs on a shared broker cannot meet.
func liveConfig(t *testing.T, url string) *configs.Config {
	cfg := dockPost(t)
	prefix := uniquePrefix()
	cfg.Broker.URL = url
	cfg.Broker.ClientID = prefix
	for i := range cfg.Sensors {
		cfg.Sensors[i].Topic = prefix + "/sensors/" + cfg.Sensors[i].Name
	}
	cfg.Output.TracksTopic = prefix + "/tracks"
	cfg.Output.HealthTopic = prefix + "/health"
	cfg.Output.StatusTopic = prefix + "/status"
	// Port 0: a free port each, so daemons can run side by side.
	cfg.Metrics.Listen = "127.0.0.1:0"
	return cfg
}

// feed publishes the gatesim scene live (t_ns = now) at every sensor's
// period until stop is closed.
func feed(pub *peer, cfg *configs.Config, scene *gatesim.Scene, stop <-chan struct{}, wg *sync.WaitGroup) {
	defer wg.Done()
	tick := time.NewTicker(50 * time.Millisecond) // the radar period; the lidar every 2nd
	defer tick.Stop()
	var seq uint64
	for {
		select {
		case <-stop:
			return
		case now := <-tick.C:
			seq++
			for i, s := range cfg.Sensors {
				if s.Kind == configs.KindPositionXY && seq%2 != 0 {
					continue
				}
				if pub.c.IsConnectionOpen() {
					pub.pub(s.Topic, scene.Payload(i, seq, now.UnixNano()), false)
				}
			}
		}
	}
}

type tracksMsg struct {
	Seq    uint64 `json:"seq"`
	TNs    int64  `json:"t_ns"`
	Tracks []struct {
		ID        uint64     `json:"id"`
		Status    string     `json:"status"`
		Pos       [2]float64 `json:"pos"`
		UpdatedNs int64      `json:"updated_ns"`
	} `json:"tracks"`
}

func decodeTracks(b []byte) (tracksMsg, bool) {
	var m tracksMsg
	return m, json.Unmarshal(b, &m) == nil
}

// brokers lists the brokers the integration tests run against: the
// embedded one always, and GODWIT_TEST_BROKER (e.g. Mosquitto) when set.
func brokers(t *testing.T) map[string]string {
	out := map[string]string{"embedded": ""}
	if u := os.Getenv("GODWIT_TEST_BROKER"); u != "" {
		out["env"] = u
	}
	return out
}

func TestDaemonOverBroker(t *testing.T) {
	for name, url := range brokers(t) {
		t.Run(name, func(t *testing.T) {
			defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
			if url == "" {
				b, err := broker.Start(broker.Config{})
				if err != nil {
					t.Fatal(err)
				}
				defer b.Close()
				url = b.URL()
			}
			daemonRoundTrip(t, url)
		})
	}
}

func daemonRoundTrip(t *testing.T, url string) {
	cfg := liveConfig(t, url)
	watch := newPeer(t, url, cfg.Broker.ClientID+"-watch")
	defer watch.close()
	watch.sub(cfg.Output.TracksTopic)
	watch.sub(cfg.Output.StatusTopic)
	watch.sub(cfg.Output.HealthTopic)
	defer func() { // leave no retained messages on a shared broker
		watch.pub(cfg.Output.StatusTopic, nil, true)
		watch.pub(cfg.Output.HealthTopic, nil, true)
	}()

	d, err := New(Options{Config: cfg})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	defer func() {
		cancel()
		<-done
	}()

	if _, ok := watch.await(5*time.Second, func(m peerMsg) bool {
		return m.topic == cfg.Output.StatusTopic && string(m.payload) == "online"
	}); !ok {
		t.Fatal("no online status within 5 s")
	}
	// A late subscriber gets the status as a retained message (MQTT 3.1.1
	// §3.3.1.3: retained messages go to new subscriptions with RETAIN set).
	late := newPeer(t, url, cfg.Broker.ClientID+"-late")
	late.sub(cfg.Output.StatusTopic)
	if _, ok := late.await(3*time.Second, func(m peerMsg) bool { return m.retained && string(m.payload) == "online" }); !ok {
		t.Error("status online is not retained")
	}
	late.close()

	pub := newPeer(t, url, cfg.Broker.ClientID+"-sensors")
	defer pub.close()
	scene := gatesim.NewScene(cfg, time.Now().UnixNano(), 1)
	stop := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go feed(pub, cfg, scene, stop, &wg)
	defer func() { close(stop); wg.Wait() }()

	// Confirmation needs 3 of 4 scans (dock-post.yaml); allow a few
	// seconds on a loaded machine.
	m, ok := watch.await(8*time.Second, func(m peerMsg) bool {
		if m.topic != cfg.Output.TracksTopic {
			return false
		}
		tm, ok := decodeTracks(m.payload)
		if !ok {
			return false
		}
		for _, tr := range tm.Tracks {
			want := gatesim.Tractors[0].At(float64(tm.TNs-scene.T0) * 1e-9)
			dx, dy := tr.Pos[0]-want[0], tr.Pos[1]-want[1]
			// 2 m: ten lidar s.d. (0.2 m, dock-post.yaml), a loose
			// "is it the tractor" bound (common practice).
			if tr.Status == "confirmed" && dx*dx+dy*dy < 2*2 {
				return true
			}
		}
		return false
	})
	if !ok {
		t.Fatalf("no confirmed track near the tractor within 8 s; stats %+v", d.Stats())
	}
	t.Logf("tracks: %.200s", m.payload)

	if _, ok := watch.await(3*time.Second, func(m peerMsg) bool { return m.topic == cfg.Output.HealthTopic }); !ok {
		t.Error("no health message within 3 s")
	}
	// latency_ms: arrival to publication, measured on the wall clock.
	if _, ok := watch.await(3*time.Second, func(m peerMsg) bool {
		var h struct {
			Latency struct{ P50, P99 float64 } `json:"latency_ms"`
		}
		return m.topic == cfg.Output.HealthTopic && json.Unmarshal(m.payload, &h) == nil &&
			h.Latency.P50 > 0 && h.Latency.P99 >= h.Latency.P50
	}); !ok {
		t.Error("no health message with a latency summary")
	}
	health := newPeer(t, url, cfg.Broker.ClientID+"-health")
	health.sub(cfg.Output.HealthTopic)
	if h, ok := health.await(3*time.Second, func(m peerMsg) bool { return m.retained }); !ok {
		t.Error("no retained health message")
	} else if !json.Valid(h.payload) {
		t.Errorf("health is not JSON: %s", h.payload)
	}
	health.close()

	cancel()
	select {
	case err := <-done:
		if err != nil {
			t.Fatalf("Run: %v", err)
		}
		done <- nil // for the deferred receive
	case <-time.After(10 * time.Second):
		t.Fatal("Run did not return within 10 s of cancel")
	}
	after := newPeer(t, url, cfg.Broker.ClientID+"-after")
	after.sub(cfg.Output.StatusTopic)
	if _, ok := after.await(3*time.Second, func(m peerMsg) bool { return m.retained && string(m.payload) == "offline" }); !ok {
		t.Error("after a graceful stop the retained status is not offline")
	}
	after.close()
	if st := d.Stats(); st.Pipeline.Accepted == 0 || st.Published == 0 {
		t.Errorf("stats after the run: %+v", st)
	}
}

// The broker goes away mid-stream and comes back on the same address: the
// daemon reconnects, re-subscribes and resumes fused output within 3 s of
// the broker's return, and reports the outage.
func TestDaemonSurvivesBrokerRestart(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	addr, url := b.Addr(), b.URL()
	cfg := liveConfig(t, url)

	d, err := New(Options{Config: cfg})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()

	scene := gatesim.NewScene(cfg, time.Now().UnixNano(), 2)
	session := func(tag string) (watch, pub *peer, stop func()) {
		watch = newPeer(t, url, cfg.Broker.ClientID+"-watch-"+tag)
		watch.sub(cfg.Output.TracksTopic)
		watch.sub(cfg.Output.HealthTopic)
		pub = newPeer(t, url, cfg.Broker.ClientID+"-sensors-"+tag)
		ch := make(chan struct{})
		var wg sync.WaitGroup
		wg.Add(1)
		go feed(pub, cfg, scene, ch, &wg)
		return watch, pub, func() { close(ch); wg.Wait(); pub.close(); watch.close() }
	}
	freshTrack := func(since time.Time) func(peerMsg) bool {
		return func(m peerMsg) bool {
			tm, ok := decodeTracks(m.payload)
			if m.topic != cfg.Output.TracksTopic || !ok {
				return false
			}
			for _, tr := range tm.Tracks {
				if tr.UpdatedNs > since.UnixNano() {
					return true
				}
			}
			return false
		}
	}

	if !waitConnected(d, 5*time.Second) {
		t.Fatal("daemon did not connect")
	}
	watch, _, stop := session("a")
	if _, ok := watch.await(8*time.Second, freshTrack(time.Time{})); !ok {
		t.Fatalf("no tracks before the outage; stats %+v", d.Stats())
	}
	stop()

	if err := b.Close(); err != nil {
		t.Fatal(err)
	}
	time.Sleep(1500 * time.Millisecond) // the daemon meets refused connects meanwhile
	b2, err := broker.Start(broker.Config{Addr: addr})
	if err != nil {
		t.Fatalf("restart on %s: %v", addr, err)
	}
	back := time.Now()
	watch, _, stop = session("b")
	// updated_ns after the return: a measurement published after the
	// restart went through the re-made subscription into a track.
	// 3 s: the deadline issue 4 sets for resuming output.
	m, ok := watch.await(time.Until(back.Add(3*time.Second)), freshTrack(back))
	if !ok {
		t.Fatalf("no freshly updated track within 3 s of the broker's return; stats %+v", d.Stats())
	}
	t.Logf("output resumed %v after the broker came back", m.at.Sub(back).Round(time.Millisecond))
	if _, ok := watch.await(3*time.Second, func(m peerMsg) bool {
		var h struct {
			Alerts []struct{ Code string } `json:"alerts"`
		}
		if m.topic != cfg.Output.HealthTopic || json.Unmarshal(m.payload, &h) != nil {
			return false
		}
		for _, a := range h.Alerts {
			if a.Code == "broker_disconnected" {
				return true
			}
		}
		return false
	}); !ok {
		t.Error("no health message reports the broker outage")
	}
	stop()
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	st := d.Stats()
	if st.Outages != 1 || st.MQTT.Reconnects < 1 || st.LastOutage < time.Second {
		t.Errorf("outage not counted: outages %d, reconnects %d, last %v", st.Outages, st.MQTT.Reconnects, st.LastOutage)
	}
	b2.Close()
}

func waitConnected(d *Daemon, timeout time.Duration) bool {
	deadline := time.Now().Add(timeout)
	for time.Now().Before(deadline) {
		if d.Stats().MQTT.Connected {
			return true
		}
		time.Sleep(10 * time.Millisecond)
	}
	return false
}

// A full queue drops the oldest messages (the newest are worth more to a
// tracker, common practice), counts them and says so in the health message
// (the engine's overrun alert; the daemon adds no alert of its own).
func TestDaemonReportsQueueOverflow(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	cfg := liveConfig(t, b.URL())
	cfg.Limits.QueueLength = 4
	watch := newPeer(t, b.URL(), cfg.Broker.ClientID+"-watch")
	defer watch.close()
	watch.sub(cfg.Output.HealthTopic)

	d, err := New(Options{Config: cfg})
	if err != nil {
		t.Fatal(err)
	}
	// The callback's side of the queue, before the engine goroutine runs:
	// 10 messages into 4 slots.
	scene := gatesim.NewScene(cfg, time.Now().UnixNano(), 4)
	for i := 0; i < 10; i++ {
		now := time.Now().UnixNano()
		d.queue.Push(cfg.Sensors[1].Topic, scene.Payload(1, uint64(i+1), now), 1, false, now)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	m, ok := watch.await(5*time.Second, func(m peerMsg) bool {
		var h struct {
			State  string `json:"state"`
			Alerts []struct {
				Code, Severity, Detail string
			} `json:"alerts"`
		}
		if json.Unmarshal(m.payload, &h) != nil {
			return false
		}
		for _, a := range h.Alerts {
			// The engine's overrun alert: dropped input is an error
			// (runtime/engine ReportDropped), the vehicle failed.
			if a.Code == "overrun" && a.Severity == "error" && h.State == "failed" &&
				strings.Contains(a.Detail, "6 input message(s) dropped") {
				return true
			}
		}
		return false
	})
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if !ok {
		t.Fatal("no failed health message with an overrun alert for the 6 dropped messages")
	}
	t.Logf("health: %.300s", m.payload)
	st := d.Stats()
	// Seqs 7..10 survive: the four newest (drop oldest).
	if st.QueueDropped != 6 || st.Pipeline.Accepted != 4 {
		t.Fatalf("dropped %d, accepted %d; want 6 and 4", st.QueueDropped, st.Pipeline.Accepted)
	}
}

// With rate_hz 0 tracks go out without the engine goroutine waiting for
// each acknowledgement (issue 7). Scans that arrive one at a time get a
// tracks message each; a burst that queues up shares messages, the last
// of which reflects the newest scan. Either way the messages come out
// complete and in order (QoS 1 on one topic keeps order, MQTT 3.1.1
// §4.6), and a graceful stop waits for every tracks message in flight
// before "offline": everything counted as published reaches the
// subscriber, nothing is counted as failed.
func TestDaemonPerScanPublishesInOrder(t *testing.T) {
	for name, url := range brokers(t) {
		t.Run(name, func(t *testing.T) {
			defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
			if url == "" {
				b, err := broker.Start(broker.Config{})
				if err != nil {
					t.Fatal(err)
				}
				defer b.Close()
				url = b.URL()
			}
			cfg := liveConfig(t, url)
			cfg.Output.RateHz = 0
			cfg.Metrics.Listen = ""
			watch := newPeer(t, url, cfg.Broker.ClientID+"-watch")
			defer watch.close()
			watch.sub(cfg.Output.TracksTopic)
			watch.sub(cfg.Output.StatusTopic)
			defer func() {
				watch.pub(cfg.Output.StatusTopic, nil, true)
				watch.pub(cfg.Output.HealthTopic, nil, true)
			}()
			d, err := New(Options{Config: cfg})
			if err != nil {
				t.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			done := make(chan error, 1)
			go func() { done <- d.Run(ctx) }()
			if _, ok := watch.await(5*time.Second, func(m peerMsg) bool {
				return m.topic == cfg.Output.StatusTopic && string(m.payload) == "online"
			}); !ok {
				cancel()
				<-done
				t.Fatal("no online status within 5 s")
			}
			pub := newPeer(t, url, cfg.Broker.ClientID+"-sensors")
			scene := gatesim.NewScene(cfg, time.Now().UnixNano(), 1)
			// One at a time, 10 ms apart: the daemon keeps up, so nearly
			// every scan has its own message (a stalled test machine may
			// let two share one).
			const paced = 30
			var lastT int64
			for seq := uint64(1); seq <= paced; seq++ {
				i := int(seq) % len(cfg.Sensors)
				lastT = time.Now().UnixNano()
				pub.c.Publish(cfg.Sensors[i].Topic, 1, false, scene.Payload(i, seq, lastT)).WaitTimeout(5 * time.Second)
				time.Sleep(10 * time.Millisecond)
			}
			deadline := time.Now().Add(5 * time.Second)
			for d.Stats().Pipeline.TracksOut < paced && time.Now().Before(deadline) {
				time.Sleep(10 * time.Millisecond)
			}
			if n := d.Stats().Pipeline.TracksOut; n < paced*9/10 {
				t.Errorf("%d tracks messages for %d paced scans, want one each", n, paced)
			}
			pacedOut := d.Stats().Pipeline.TracksOut
			// The burst goes out without waiting for acknowledgements, so
			// the daemon's publishes overlap and scans queue up.
			const scans = paced + 300
			var toks []paho.Token
			for seq := uint64(paced + 1); seq <= scans; seq++ {
				i := int(seq) % len(cfg.Sensors)
				lastT = time.Now().UnixNano()
				toks = append(toks, pub.c.Publish(cfg.Sensors[i].Topic, 1, false, scene.Payload(i, seq, lastT)))
			}
			for _, tok := range toks {
				tok.WaitTimeout(5 * time.Second)
			}
			pub.close()
			// Let the queue take the burst, then stop: the stop drains what
			// is queued and waits for the publishes in flight.
			deadline = time.Now().Add(5 * time.Second)
			for d.Stats().QueuePushed < scans && time.Now().Before(deadline) {
				time.Sleep(10 * time.Millisecond)
			}
			cancel()
			if err := <-done; err != nil {
				t.Fatalf("Run: %v", err)
			}
			st := d.Stats()
			if st.PublishErrors != 0 {
				t.Errorf("%d publish errors", st.PublishErrors)
			}
			tracksOut := st.Pipeline.TracksOut
			if st.Pipeline.Accepted != scans {
				t.Fatalf("%d scans accepted, want %d; stats %+v", st.Pipeline.Accepted, scans, st)
			}
			if burst := tracksOut - pacedOut; burst < 1 || burst >= scans-paced {
				t.Errorf("%d tracks messages for a burst of %d scans, want at least one and fewer than one each", burst, scans-paced)
			}
			// Published counts health too; every tracks message is among it.
			if st.Published < tracksOut {
				t.Errorf("published %d < tracks encoded %d", st.Published, tracksOut)
			}
			// "offline" comes after the last tracks message on the same
			// connection, so once it is here every tracks message is too.
			if _, ok := watch.await(5*time.Second, func(m peerMsg) bool {
				return m.topic == cfg.Output.StatusTopic && string(m.payload) == "offline"
			}); !ok {
				t.Fatal("no offline status after the stop")
			}
			watch.mu.Lock()
			defer watch.mu.Unlock()
			var got uint64
			lastSeq, lastTracksT := uint64(0), int64(0)
			for _, m := range watch.msgs {
				if m.topic != cfg.Output.TracksTopic {
					continue
				}
				tm, ok := decodeTracks(m.payload)
				if !ok {
					t.Fatalf("tracks message %d is not JSON: %.200s", got, m.payload)
				}
				if got > 0 && (tm.Seq <= lastSeq || tm.TNs < lastTracksT) {
					t.Fatalf("tracks message %d out of order: seq %d t_ns %d after seq %d t_ns %d",
						got, tm.Seq, tm.TNs, lastSeq, lastTracksT)
				}
				lastSeq, lastTracksT = tm.Seq, tm.TNs
				got++
			}
			if got != tracksOut {
				t.Errorf("subscriber got %d tracks messages, daemon encoded %d", got, tracksOut)
			}
			// The newest message reflects the newest scan: stamped at its
			// measurement time (Engine.Advance with rate_hz 0).
			if lastTracksT != lastT {
				t.Errorf("the last tracks message is stamped %d, the newest scan %d", lastTracksT, lastT)
			}
		})
	}
}
