package resilience

import (
	"testing"
	"time"

	"go.uber.org/goleak"

	"github.com/godwit-fusion/godwit/runtime/bench"
	"github.com/godwit-fusion/godwit/transport/broker"
	"github.com/godwit-fusion/godwit/transport/mqtt"
)

// The broker is killed and brought back on the same address twice while
// sensors publish: the daemon must not crash, must reconnect, its output
// must resume, and each outage must show in health as the engine's
// broker_disconnected alert (the daemon reports each outage in the log, in
// Stats and in the health message). The broker stays down 1 s, longer
// than health.raise_ms (500 ms by default), so the alert is raised.
func TestBrokerKilledAndRestartedTwice(t *testing.T) {
	leaks := goleak.IgnoreCurrent()
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	addr, url := b.Addr(), b.URL()
	cfg, err := bench.Config(bench.ConfigParams{BrokerURL: url, QoS: 1, LidarMS: 20, RadarMS: 20})
	if err != nil {
		t.Fatal(err)
	}
	r := startDaemon(t, cfg, nil)
	k := newConsumer(t, url)
	f := startFeeder(t, url, 0, 5, 10*time.Millisecond)
	if !waitFor(10*time.Second, func() bool { return k.nT.Load() > 20 }) {
		t.Fatalf("no output before the first outage: %d tracks messages", k.nT.Load())
	}
	for i := 1; i <= 2; i++ {
		if err := b.Close(); err != nil {
			t.Fatal(err)
		}
		down := time.Now().UnixNano()
		time.Sleep(time.Second)
		if b, err = broker.Start(broker.Config{Addr: addr}); err != nil {
			t.Fatalf("restart %d: %v", i, err)
		}
		n0 := k.nT.Load()
		if !waitFor(10*time.Second, func() bool { return k.nT.Load() > n0+20 }) {
			t.Fatalf("restart %d: output did not resume (%d tracks messages since)", i, k.nT.Load()-n0)
		}
		if !waitFor(5*time.Second, func() bool {
			for _, h := range k.healthSince(down) {
				if hasCode(h, "broker_disconnected") && h.state != "ok" {
					return true
				}
			}
			return false
		}) {
			t.Fatalf("restart %d: no health message with broker_disconnected and a state other than ok after the outage", i)
		}
	}
	st := r.d.Stats()
	if st.Outages < 2 || st.MQTT.Reconnects < 2 {
		t.Errorf("outages %d, reconnects %d: want at least 2 of each", st.Outages, st.MQTT.Reconnects)
	}
	tr, _ := k.snapshot()
	for _, s := range tr {
		if s.bad {
			t.Fatalf("a tracks message carried a non-finite or absurd value: %+v", s)
		}
	}
	f.close()
	k.c.Close()
	r.close(t)
	if err := b.Close(); err != nil {
		t.Error(err)
	}
	goleak.VerifyNone(t, leaks)
}

// With QoS 1 and a persistent session (MQTT 3.1.1 §3.1.2.4: the broker
// keeps the session of a client that connected with CleanSession 0 and
// queues its QoS 1 messages while it is away), nothing published while
// godwit's connection is down is lost. The embedded broker keeps sessions
// in memory only, so the outage here is godwit's connection being cut
// (Kick), not a broker restart.
func TestPersistentSessionLosesNothingDuringOutage(t *testing.T) {
	leaks := goleak.IgnoreCurrent()
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	const id = "godwit-resilience-persist"
	cfg, err := bench.Config(bench.ConfigParams{BrokerURL: b.URL(), ClientID: id, QoS: 1, Persistent: true, LidarMS: 10})
	if err != nil {
		t.Fatal(err)
	}
	// A 400 ms backoff leaves a real gap between the cut and the reconnect.
	r := startDaemon(t, cfg, func(o *mqtt.Options) { o.MinBackoff, o.MaxBackoff = 400*time.Millisecond, 400*time.Millisecond })
	pub, err := mqtt.New(mqtt.Options{URL: b.URL(), ClientID: "resilience-persist-pub", CleanSession: true, QoS: 1})
	if err != nil {
		t.Fatal(err)
	}
	pub.Start()
	if !pub.WaitConnected(5 * time.Second) {
		t.Fatal("publisher did not connect")
	}
	scene := bench.NewLive(3, 0, 3)
	send := func(n int) {
		for i := 0; i < n; i++ {
			p, err := scene.Next(false, time.Now().UnixNano())
			if err != nil {
				t.Fatal(err)
			}
			if err := pub.Publish(bench.LidarTopic, p, 1, false); err != nil {
				t.Fatal(err)
			}
			time.Sleep(5 * time.Millisecond)
		}
	}
	processed := func() uint64 { return r.d.Stats().Pipeline.Messages }
	// Until the daemon has subscribed, messages go nowhere: probe first.
	if !waitFor(10*time.Second, func() bool { send(1); return processed() > 0 }) {
		t.Fatal("daemon never received a message")
	}
	base := processed()
	send(20)
	if !waitFor(5*time.Second, func() bool { return processed() >= base+20 }) {
		t.Fatalf("before the outage: %d of 20 processed", processed()-base)
	}
	before := processed()
	if !b.Kick(id) {
		t.Fatal("the daemon's client was not connected")
	}
	if !waitFor(time.Second, func() bool { return !r.d.Stats().MQTT.Connected }) {
		t.Fatal("the daemon did not notice the cut")
	}
	send(40) // 200 ms, inside the 400 ms backoff
	if r.d.Stats().MQTT.Connected {
		t.Log("the daemon reconnected before the last message; part of the burst was live")
	}
	if !waitFor(5*time.Second, func() bool { return processed() >= before+40 }) {
		t.Fatalf("after the outage: %d of 40 messages processed", processed()-before)
	}
	time.Sleep(100 * time.Millisecond)
	st := r.d.Stats()
	if got := st.Pipeline.Messages - before; got != 40 {
		t.Errorf("processed %d messages after the cut, want exactly 40", got)
	}
	for _, s := range r.d.Stats().Pipeline.Rejected {
		if s != 0 {
			t.Errorf("rejections %v, want none", st.Pipeline.Rejected)
			break
		}
	}
	if st.Outages != 1 {
		t.Errorf("outages %d, want 1", st.Outages)
	}
	pub.Close()
	r.close(t)
	if err := b.Close(); err != nil {
		t.Error(err)
	}
	goleak.VerifyNone(t, leaks)
}
