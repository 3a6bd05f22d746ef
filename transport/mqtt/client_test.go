package mqtt

import (
	"crypto/rand"
	"encoding/hex"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"go.uber.org/goleak"

	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/broker"
)

func TestMain(m *testing.M) {
	goleak.VerifyTestMain(m)
}

// uniq makes topic prefixes and client ids unique per test run, so runs
// against a shared broker cannot see each other's messages or sessions.
func uniq(t testing.TB) string {
	var b [6]byte
	if _, err := rand.Read(b[:]); err != nil {
		t.Fatal(err)
	}
	return hex.EncodeToString(b[:])
}

// brokers yields the embedded broker and, when GODWIT_TEST_BROKER is set
// (CI points it at Mosquitto), that broker too.
func brokers(t *testing.T, f func(t *testing.T, url string)) {
	t.Run("embedded", func(t *testing.T) {
		b, err := broker.Start(broker.Config{})
		if err != nil {
			t.Fatal(err)
		}
		defer b.Close()
		f(t, b.URL())
	})
	if u := os.Getenv("GODWIT_TEST_BROKER"); u != "" {
		t.Run("external", func(t *testing.T) { f(t, u) })
	} else {
		t.Log("GODWIT_TEST_BROKER not set: external broker run skipped")
	}
}

// statusLog records what arrives on a status topic.
type statusLog struct {
	mu   sync.Mutex
	msgs []string
}

func (s *statusLog) Push(_ string, p []byte, _ byte, _ bool, _ int64) bool {
	s.mu.Lock()
	s.msgs = append(s.msgs, string(p))
	s.mu.Unlock()
	return true
}

func (s *statusLog) waitFor(t *testing.T, want string, d time.Duration) {
	t.Helper()
	deadline := time.Now().Add(d)
	for time.Now().Before(deadline) {
		s.mu.Lock()
		n := len(s.msgs)
		last := ""
		if n > 0 {
			last = s.msgs[n-1]
		}
		s.mu.Unlock()
		if last == want {
			return
		}
		time.Sleep(10 * time.Millisecond)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	t.Fatalf("status %q never arrived; got %q", want, s.msgs)
}

func newClient(t *testing.T, o Options) *Client {
	t.Helper()
	c, err := New(o)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func radarMsg(seq uint64) *transport.Measurement {
	return &transport.Measurement{
		Sensor: "front_radar", Seq: seq, TNs: time.Now().UnixNano(),
		Dets: []transport.Detection{
			{Dim: 3, Z: [3]float64{23.4, 0.12, -1.5}},
			{Dim: 3, Z: [3]float64{41.0, -0.30, float64(seq)}, HasR: true,
				R: [9]float64{0.09, 0, 0, 0, 0.0001, 0, 0, 0, 0.04}, Class: "cart", Score: 0.8, HasScore: true},
		},
	}
}

// popDecoded waits for the next message on q and decodes it.
func popDecoded(t *testing.T, q *transport.Queue, d *transport.Decoder, in *transport.Inbound, m *transport.Measurement, wait time.Duration) bool {
	t.Helper()
	deadline := time.After(wait)
	for !q.Pop(in) {
		select {
		case <-q.Ready():
		case <-deadline:
			return false
		}
	}
	if err := d.Decode(in.Payload, in.ArrivalNs, m); err != nil {
		t.Fatalf("decode %s: %v", in.Topic, err)
	}
	return true
}

// TestMeasurementsOverBroker publishes measurement messages through a real
// broker and receives them through Client + Queue + Decoder unchanged; the
// status topic goes online on connect and offline on Close (DESIGN.md).
func TestMeasurementsOverBroker(t *testing.T) {
	brokers(t, func(t *testing.T, url string) {
		id := uniq(t)
		prefix := "godwit-test/" + id
		status := prefix + "/status"

		watcher := newClient(t, Options{URL: url, ClientID: "watch-" + id, CleanSession: true, QoS: 1})
		var st statusLog
		if err := watcher.Subscribe(status, 1, &st); err != nil {
			t.Fatal(err)
		}
		watcher.Start()
		defer watcher.Close()
		if !watcher.WaitConnected(5 * time.Second) {
			t.Fatal("watcher did not connect")
		}

		q := transport.NewQueue(256, 512, transport.DefaultMaxPayloadBytes)
		sub := newClient(t, Options{URL: url, ClientID: "godwit-" + id, QoS: 1, StatusTopic: status})
		if err := sub.Subscribe(prefix+"/sensors/+", 1, q); err != nil {
			t.Fatal(err)
		}
		sub.Start()
		if !sub.WaitConnected(5 * time.Second) {
			t.Fatal("subscriber did not connect")
		}
		st.waitFor(t, "online", 5*time.Second)

		pub := newClient(t, Options{URL: url, ClientID: "pub-" + id, CleanSession: true})
		pub.Start()
		defer pub.Close()
		if !pub.WaitConnected(5 * time.Second) {
			t.Fatal("publisher did not connect")
		}
		const n = 50
		var buf []byte
		for i := range uint64(n) {
			buf, _ = transport.AppendMeasurement(buf[:0], radarMsg(i))
			if err := pub.Publish(prefix+"/sensors/front_radar", buf, 1, false); err != nil {
				t.Fatal(err)
			}
		}
		dec, err := transport.NewDecoder([]transport.SensorSpec{{Name: "front_radar", Dim: 3}}, transport.Limits{})
		if err != nil {
			t.Fatal(err)
		}
		var in transport.Inbound
		var m transport.Measurement
		for i := range uint64(n) {
			if !popDecoded(t, q, dec, &in, &m, 5*time.Second) {
				t.Fatalf("message %d did not arrive", i)
			}
			want := radarMsg(i)
			// QoS 1 on one topic keeps order (MQTT 3.1.1 §4.6).
			if m.Seq != i || len(m.Dets) != 2 || m.Dets[1].Z != want.Dets[1].Z || m.Dets[1].R != want.Dets[1].R ||
				m.Dets[1].Class != "cart" || m.Dets[1].Score != 0.8 {
				t.Fatalf("message %d came back as %+v", i, m)
			}
			if in.Topic != prefix+"/sensors/front_radar" || in.QoS != 1 {
				t.Fatalf("topic %q qos %d", in.Topic, in.QoS)
			}
		}
		if q.Dropped() != 0 {
			t.Errorf("queue dropped %d", q.Dropped())
		}
		if s := sub.Stats(); s.Connects != 1 || s.Disconnects != 0 || !s.Connected {
			t.Errorf("stats %+v", s)
		}
		sub.Close()
		st.waitFor(t, "offline", 5*time.Second)
	})
}

// TestLastWill: a connection that dies without DISCONNECT leaves the
// retained status "offline" (the MQTT last will, MQTT 3.1.1 §3.1.2.5), and
// the client reconnects and says "online" again.
func TestLastWill(t *testing.T) {
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	id := uniq(t)
	status := "godwit-test/" + id + "/status"
	watcher := newClient(t, Options{URL: b.URL(), ClientID: "watch-" + id, CleanSession: true})
	var st statusLog
	watcher.Subscribe(status, 1, &st)
	watcher.Start()
	defer watcher.Close()
	watcher.WaitConnected(5 * time.Second)

	c := newClient(t, Options{URL: b.URL(), ClientID: "godwit-" + id, QoS: 1, StatusTopic: status,
		MinBackoff: 300 * time.Millisecond})
	c.Start()
	defer c.Close()
	st.waitFor(t, "online", 5*time.Second)
	if !b.Kick("godwit-" + id) {
		t.Fatal("client not found on the broker")
	}
	st.waitFor(t, "offline", 5*time.Second)
	st.waitFor(t, "online", 5*time.Second)
	if s := c.Stats(); s.Reconnects != 1 || s.Disconnects != 1 {
		t.Errorf("stats %+v, want one disconnect and one reconnect", s)
	}
}

// TestBrokerRestart is the fault test: the broker goes away mid-stream and
// comes back on the same address. The client must report the outage,
// reconnect, re-subscribe (the restarted broker has forgotten the session),
// and messages must flow again within 3 s of the broker's return (issue 4).
func TestBrokerRestart(t *testing.T) {
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	addr := b.Addr()
	url := b.URL()
	id := uniq(t)
	topic := "godwit-test/" + id + "/sensors/front_radar"

	var evMu sync.Mutex
	var events []Event
	q := transport.NewQueue(1024, 512, transport.DefaultMaxPayloadBytes)
	sub := newClient(t, Options{URL: url, ClientID: "godwit-" + id, QoS: 1, MaxBackoff: time.Second,
		OnState: func(e Event) { evMu.Lock(); events = append(events, e); evMu.Unlock() }})
	sub.Subscribe(topic, 1, q)
	sub.Start()
	pub := newClient(t, Options{URL: url, ClientID: "pub-" + id, CleanSession: true, MaxBackoff: time.Second})
	pub.Start()
	if !sub.WaitConnected(5*time.Second) || !pub.WaitConnected(5*time.Second) {
		t.Fatal("no connection")
	}

	// The sensor keeps publishing every 20 ms whatever the broker does.
	stop := make(chan struct{})
	var pubWG sync.WaitGroup
	pubWG.Add(1)
	go func() {
		defer pubWG.Done()
		var buf []byte
		for seq := uint64(0); ; seq++ {
			select {
			case <-stop:
				return
			case <-time.After(20 * time.Millisecond):
			}
			buf, _ = transport.AppendMeasurement(buf[:0], radarMsg(seq))
			_ = pub.Publish(topic, buf, 1, false) // fails while the broker is down
		}
	}()
	defer func() { close(stop); pubWG.Wait(); pub.Close(); sub.Close() }()

	dec, _ := transport.NewDecoder([]transport.SensorSpec{{Name: "front_radar", Dim: 3}}, transport.Limits{})
	var in transport.Inbound
	var m transport.Measurement
	for range 10 {
		if !popDecoded(t, q, dec, &in, &m, 5*time.Second) {
			t.Fatal("no messages before the outage")
		}
	}

	b.Close()
	deadline := time.Now().Add(5 * time.Second)
	for sub.Connected() && time.Now().Before(deadline) {
		time.Sleep(10 * time.Millisecond)
	}
	if sub.Connected() {
		t.Fatal("outage not noticed")
	}
	time.Sleep(500 * time.Millisecond) // stay down for a while
	for q.Pop(&in) {                   // drain what arrived before the outage
	}
	lastBefore := m.Seq

	b2, err := broker.Start(broker.Config{Addr: addr})
	if err != nil {
		t.Fatalf("broker did not come back on %s: %v", addr, err)
	}
	defer b2.Close()
	back := time.Now()
	resumed := false
	for !resumed {
		if !popDecoded(t, q, dec, &in, &m, time.Until(back.Add(3*time.Second))) {
			t.Fatalf("no message within 3 s of the broker's return")
		}
		resumed = m.Seq > lastBefore
	}
	t.Logf("messages flow again %v after the broker's return", time.Since(back).Round(time.Millisecond))

	s := sub.Stats()
	if s.Disconnects != 1 || s.Reconnects != 1 {
		t.Errorf("stats %+v, want one disconnect and one reconnect", s)
	}
	evMu.Lock()
	defer evMu.Unlock()
	var kinds []EventKind
	for _, e := range events {
		if len(kinds) == 0 || kinds[len(kinds)-1] != e.Kind {
			kinds = append(kinds, e.Kind)
		}
	}
	// connected → disconnected → (failed attempts) → connected
	if len(kinds) < 3 || kinds[0] != Connected || kinds[1] != Disconnected || kinds[len(kinds)-1] != Connected {
		t.Errorf("state events %v", kinds)
	}
}

func TestBackoff(t *testing.T) {
	// Capped doubling from the minimum (common practice); jitter only shortens.
	min, max := 100*time.Millisecond, 2*time.Second
	want := []time.Duration{100, 200, 400, 800, 1600, 2000, 2000}
	for n, w := range want {
		if got := Backoff(n, min, max, 0); got != w*time.Millisecond {
			t.Errorf("Backoff(%d) = %v, want %v", n, got, w*time.Millisecond)
		}
		if got := Backoff(n, min, max, 0.999); got > w*time.Millisecond || got < w*time.Millisecond*8/10 {
			t.Errorf("Backoff(%d) with jitter = %v", n, got)
		}
	}
}

func TestOptionsChecked(t *testing.T) {
	for _, o := range []Options{
		{URL: "http://127.0.0.1:1883", ClientID: "a"},
		{URL: "tcp://", ClientID: "a"},
		{URL: "tcp://127.0.0.1:1883"}, // persistent session without a client id
		{URL: "tcp://127.0.0.1:1883", ClientID: "a", QoS: 3},
		{URL: "ssl://127.0.0.1:8883", ClientID: "a", CertFile: "x.pem"}, // key missing
		{URL: "ssl://127.0.0.1:8883", ClientID: "a", CAFile: "/does/not/exist"},
		{URL: "tcp://127.0.0.1:1883", ClientID: "a", PasswordFile: "/does/not/exist"},
	} {
		if _, err := New(o); err == nil {
			t.Errorf("%+v accepted", o)
		}
	}
}

func TestPasswordSources(t *testing.T) {
	dir := t.TempDir()
	f := filepath.Join(dir, "pw")
	os.WriteFile(f, []byte("s3cret\n"), 0o600)
	t.Setenv(PasswordEnv, "from-env")
	if pw, ok, err := readPassword(f); err != nil || !ok || pw != "s3cret" {
		t.Errorf("file: %q %v %v", pw, ok, err)
	}
	if pw, ok, _ := readPassword(""); !ok || pw != "from-env" {
		t.Errorf("env: %q %v", pw, ok)
	}

	// The broker sees exactly these credentials.
	var mu sync.Mutex
	var gotUser, gotPass string
	b, err := broker.Start(broker.Config{Authenticate: func(_, user string, pass []byte) bool {
		mu.Lock()
		gotUser, gotPass = user, string(pass)
		mu.Unlock()
		return user == "shuttle" && string(pass) == "s3cret"
	}})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	good := newClient(t, Options{URL: b.URL(), ClientID: "pw-" + uniq(t), Username: "shuttle", PasswordFile: f})
	good.Start()
	ok := good.WaitConnected(5 * time.Second)
	good.Close()
	if !ok {
		mu.Lock()
		t.Fatalf("not admitted with %q/%q", gotUser, gotPass)
	}
	var failures sync.WaitGroup
	failures.Add(1)
	var once sync.Once
	bad := newClient(t, Options{URL: b.URL(), ClientID: "pw-" + uniq(t), Username: "shuttle", // env password
		OnState: func(e Event) {
			if e.Kind == ConnectFailed {
				once.Do(failures.Done)
			}
		}})
	bad.Start()
	failures.Wait()
	bad.Close()
	if bad.Stats().Connects != 0 {
		t.Error("wrong password admitted")
	}
}

func TestStatsString(t *testing.T) {
	for k, w := range map[EventKind]string{Connected: "connected", Disconnected: "disconnected", ConnectFailed: "connect_failed"} {
		if k.String() != w {
			t.Errorf("%d = %s", int(k), k)
		}
	}
}

// TestPublishAsync: messages handed over without waiting arrive complete
// and in the order of the calls (QoS 1 on one topic keeps order, MQTT 3.1.1
// §4.6), each buffer reused only after its Pending completed; a client
// that is not connected refuses the hand-over with an error.
func TestPublishAsync(t *testing.T) {
	brokers(t, func(t *testing.T, url string) {
		id := uniq(t)
		topic := "godwit-test/" + id + "/sensors/front_radar"
		q := transport.NewQueue(512, 512, transport.DefaultMaxPayloadBytes)
		sub := newClient(t, Options{URL: url, ClientID: "sub-" + id, CleanSession: true, QoS: 1})
		if err := sub.Subscribe(topic, 1, q); err != nil {
			t.Fatal(err)
		}
		sub.Start()
		defer sub.Close()
		pub := newClient(t, Options{URL: url, ClientID: "pub-" + id, CleanSession: true})
		if _, err := pub.PublishAsync(topic, []byte("x"), 1, false); err == nil {
			t.Error("PublishAsync before Start: no error")
		}
		pub.Start()
		defer pub.Close()
		if !sub.WaitConnected(5*time.Second) || !pub.WaitConnected(5*time.Second) {
			t.Fatal("clients did not connect")
		}
		const n, slots = 200, 4
		var bufs [slots][]byte
		var pend [slots]Pending
		for i := range uint64(n) {
			k := i % slots
			if !pend[k].Done() {
				if err := pub.Wait(pend[k]); err != nil {
					t.Fatalf("message %d: %v", i-slots, err)
				}
			} else if err := pend[k].Err(); err != nil {
				t.Fatalf("message %d: %v", i-slots, err)
			}
			bufs[k], _ = transport.AppendMeasurement(bufs[k][:0], radarMsg(i))
			p, err := pub.PublishAsync(topic, bufs[k], 1, false)
			if err != nil {
				t.Fatal(err)
			}
			pend[k] = p
		}
		for k := range pend {
			if err := pub.Wait(pend[k]); err != nil {
				t.Fatal(err)
			}
			if !pend[k].Done() {
				t.Error("Done false after Wait returned")
			}
		}
		dec, err := transport.NewDecoder([]transport.SensorSpec{{Name: "front_radar", Dim: 3}}, transport.Limits{})
		if err != nil {
			t.Fatal(err)
		}
		var in transport.Inbound
		var m transport.Measurement
		for i := range uint64(n) {
			if !popDecoded(t, q, dec, &in, &m, 5*time.Second) {
				t.Fatalf("message %d did not arrive", i)
			}
			if m.Seq != i || m.Dets[1].Z[2] != float64(i) {
				t.Fatalf("message %d came back as seq %d z %v", i, m.Seq, m.Dets[1].Z)
			}
		}
	})
}

// The zero Pending is a completed publish without error.
func TestPendingZero(t *testing.T) {
	var p Pending
	if !p.Done() || p.Err() != nil {
		t.Errorf("zero Pending: done %v err %v", p.Done(), p.Err())
	}
}
