package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"net"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/broker"
	"go.uber.org/goleak"
)

// peer is a plain paho client for the other side of the wire.
type peer struct {
	c    paho.Client
	mu   sync.Mutex
	msgs []paho.Message
}

func connectPeer(t *testing.T, url, id string, within time.Duration) *peer {
	t.Helper()
	p := &peer{}
	deadline := time.Now().Add(within)
	for {
		p.c = paho.NewClient(paho.NewClientOptions().AddBroker(url).SetClientID(id).SetAutoReconnect(false).
			SetConnectTimeout(2 * time.Second))
		tok := p.c.Connect()
		if tok.WaitTimeout(3*time.Second) && tok.Error() == nil {
			return p
		}
		if time.Now().After(deadline) {
			t.Fatalf("peer cannot connect to %s: %v", url, tok.Error())
		}
		time.Sleep(50 * time.Millisecond)
	}
}

func (p *peer) sub(t *testing.T, filter string) {
	t.Helper()
	tok := p.c.Subscribe(filter, 1, func(_ paho.Client, m paho.Message) {
		p.mu.Lock()
		p.msgs = append(p.msgs, m)
		p.mu.Unlock()
	})
	if !tok.WaitTimeout(3*time.Second) || tok.Error() != nil {
		t.Fatalf("subscribe %s: %v", filter, tok.Error())
	}
}

func (p *peer) await(within time.Duration, ok func(paho.Message) bool) bool {
	deadline := time.Now().Add(within)
	for {
		p.mu.Lock()
		for _, m := range p.msgs {
			if ok(m) {
				p.mu.Unlock()
				return true
			}
		}
		p.mu.Unlock()
		if !time.Now().Before(deadline) {
			return false
		}
		time.Sleep(10 * time.Millisecond)
	}
}

func (p *peer) pub(topic string, payload []byte, retain bool) {
	p.c.Publish(topic, 1, retain, payload).WaitTimeout(3 * time.Second)
}

// liveConfigFile writes the dock-post example for broker url, with topics
// under a unique prefix, and returns its path and the configuration.
func liveConfigFile(t *testing.T, url string) (string, *configs.Config) {
	t.Helper()
	cfg, err := configs.Load(dockPostPath)
	if err != nil {
		t.Fatal(err)
	}
	prefix := fmt.Sprintf("gwcmd-%d-%d", os.Getpid(), time.Now().UnixNano()%1e9)
	cfg.Broker.URL, cfg.Broker.ClientID = url, prefix
	for i := range cfg.Sensors {
		cfg.Sensors[i].Topic = prefix + "/sensors/" + cfg.Sensors[i].Name
	}
	cfg.Output.TracksTopic, cfg.Output.HealthTopic, cfg.Output.StatusTopic = prefix+"/tracks", prefix+"/health", prefix+"/status"
	text, err := configs.Marshal(cfg)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "live.yaml")
	if err := os.WriteFile(path, text, 0o644); err != nil {
		t.Fatal(err)
	}
	return path, cfg
}

type cmdResult struct {
	code     int
	out, err string
}

func startCmd(t *testing.T, ctx context.Context, args ...string) <-chan cmdResult {
	ch := make(chan cmdResult, 1)
	go func() {
		code, out, errs := runCmd(t, ctx, args...)
		ch <- cmdResult{code, out, errs}
	}()
	return ch
}

func wait(t *testing.T, ch <-chan cmdResult, within time.Duration) cmdResult {
	t.Helper()
	select {
	case r := <-ch:
		return r
	case <-time.After(within):
		t.Fatalf("command did not stop within %v", within)
		return cmdResult{}
	}
}

// godwit run: tracks out for measurements in, SIGINT (context cancel) is a
// graceful stop with exit 0 and the retained status offline.
func TestRunCommand(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	path, cfg := liveConfigFile(t, b.URL())
	watch := connectPeer(t, b.URL(), cfg.Broker.ClientID+"-watch", time.Second)
	defer watch.c.Disconnect(100)
	watch.sub(t, cfg.Output.TracksTopic)
	watch.sub(t, cfg.Output.StatusTopic)

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	res := startCmd(t, ctx, "run", "--config", path, "--log-level", "warn")
	if !watch.await(5*time.Second, func(m paho.Message) bool { return string(m.Payload()) == "online" }) {
		t.Fatal("no online status")
	}
	scene := gatesim.NewScene(cfg, time.Now().UnixNano(), 3)
	var seq uint64
	got := false
	for deadline := time.Now().Add(8 * time.Second); !got && time.Now().Before(deadline); {
		seq++
		watch.pub(cfg.Sensors[1].Topic, scene.Payload(1, seq, time.Now().UnixNano()), false) // the lidar
		time.Sleep(50 * time.Millisecond)
		got = watch.await(0, func(m paho.Message) bool {
			return m.Topic() == cfg.Output.TracksTopic && strings.Contains(string(m.Payload()), `"status":"confirmed"`)
		})
	}
	if !got {
		t.Fatal("no confirmed track published")
	}
	cancel()
	r := wait(t, res, 10*time.Second)
	if r.code != exitOK {
		t.Fatalf("run: exit %d after a graceful stop\n%s", r.code, r.err)
	}
	after := connectPeer(t, b.URL(), cfg.Broker.ClientID+"-after", time.Second)
	defer after.c.Disconnect(100)
	after.sub(t, cfg.Output.StatusTopic)
	if !after.await(3*time.Second, func(m paho.Message) bool { return m.Retained() && string(m.Payload()) == "offline" }) {
		t.Error("retained status is not offline after the stop")
	}
}

func freeLoopbackAddr(t *testing.T) string {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	l.Close()
	return addr
}

func TestRunEmbeddedBroker(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	url := "tcp://" + freeLoopbackAddr(t)
	path, cfg := liveConfigFile(t, url)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	res := startCmd(t, ctx, "run", "--config", path, "--embedded-broker", "--log-level", "error")
	watch := connectPeer(t, url, cfg.Broker.ClientID+"-watch", 5*time.Second)
	watch.sub(t, cfg.Output.StatusTopic)
	if !watch.await(5*time.Second, func(m paho.Message) bool { return string(m.Payload()) == "online" }) {
		t.Error("no online status from the daemon on its embedded broker")
	}
	watch.c.Disconnect(100)
	cancel()
	if r := wait(t, res, 10*time.Second); r.code != exitOK {
		t.Fatalf("exit %d\n%s", r.code, r.err)
	}
}

// godwit record: every message from the moment of subscription on, byte
// for byte, binary payloads included (DESIGN.md recording: payload_b64).
func TestRecordCommand(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	out := filepath.Join(t.TempDir(), "rec.jsonl")
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	res := startCmd(t, ctx, "record", "--broker", b.URL(), "--topic", "yard/sensors/+", "--out", out, "--note", "test")
	pub := connectPeer(t, b.URL(), "record-test-pub", time.Second)
	defer pub.c.Disconnect(100)
	sent := map[int][]byte{}
	for i := 1; i <= 150; i++ {
		p := []byte(fmt.Sprintf(`{"v":1,"sensor":"tow_lidar","seq":%d,"t_ns":%d,"dets":[]}`, i, time.Now().UnixNano()))
		if i%10 == 0 {
			p = []byte{0xff, 0x00, byte(i), '\n'} // not JSON: must come back via payload_b64
		}
		sent[i] = p
		pub.pub("yard/sensors/tow_lidar", p, false)
		pub.pub("yard/other/ignored", p, false) // outside the filter
		time.Sleep(5 * time.Millisecond)
	}
	// Written while recording, not only at the stop: at least once a
	// second the file gains what arrived.
	flushed := false
	for deadline := time.Now().Add(3 * time.Second); !flushed && time.Now().Before(deadline); time.Sleep(50 * time.Millisecond) {
		b, _ := os.ReadFile(out)
		flushed = bytes.Count(b, []byte("\n")) > 100
	}
	if !flushed {
		t.Error("nothing flushed to the recording while running")
	}
	time.Sleep(500 * time.Millisecond) // let the last deliveries land before the stop
	cancel()
	r := wait(t, res, 10*time.Second)
	if r.code != exitOK {
		t.Fatalf("record: exit %d\n%s", r.code, r.err)
	}
	var n int
	if _, err := fmt.Sscanf(r.out, "recorded %d messages", &n); err != nil {
		t.Fatalf("record printed %q", r.out)
	}
	f, err := os.Open(out)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rr := transport.NewRecordReader(f, 0)
	var rec transport.Record
	var prevRx int64
	first, last := 0, 0
	for {
		err := rr.Next(&rec)
		if err != nil {
			break
		}
		if rec.Topic != "yard/sensors/tow_lidar" {
			t.Fatalf("recorded topic %q outside the filter", rec.Topic)
		}
		if rec.RxNs < prevRx {
			t.Fatal("rx_ns goes backwards")
		}
		prevRx = rec.RxNs
		last++
		if first == 0 {
			// Find which message this is; after it, every one in order.
			for i := 1; i <= 150; i++ {
				if string(sent[i]) == string(rec.Payload) {
					first, last = i, i
				}
			}
			if first == 0 {
				t.Fatalf("recorded payload %q was never sent", rec.Payload)
			}
			continue
		}
		if string(rec.Payload) != string(sent[last]) {
			t.Fatalf("record %d: payload %q, sent %q", last-first+1, rec.Payload, sent[last])
		}
	}
	if rr.Malformed() != 0 {
		t.Fatalf("%d malformed lines in our own recording", rr.Malformed())
	}
	if h, ok := rr.Header(); !ok || h.Note != "test" {
		t.Fatalf("header %+v", h)
	}
	if last != 150 || rr.Records() != n || n != last-first+1 {
		t.Fatalf("recorded %d (printed %d), messages %d..%d of 150", rr.Records(), n, first, last)
	}
	t.Logf("recorded messages %d..%d", first, last)
}

func TestRecordSeconds(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	out := filepath.Join(t.TempDir(), "rec.jsonl")
	r := wait(t, startCmd(t, context.Background(), "record", "--broker", b.URL(), "--topic", "#", "--out", out, "--seconds", "0.3"), 10*time.Second)
	if r.code != exitOK || !strings.HasPrefix(r.out, "recorded 0 messages") {
		t.Fatalf("exit %d, output %q %s", r.code, r.out, r.err)
	}
	// Nobody listens on a closed port: never connected is a runtime failure.
	r = wait(t, startCmd(t, context.Background(), "record", "--broker", "tcp://"+freeLoopbackAddr(t), "--topic", "#", "--out", out, "--seconds", "0.3"), 10*time.Second)
	if r.code != exitRuntime {
		t.Fatalf("unreachable broker: exit %d, want %d", r.code, exitRuntime)
	}
}

func TestLiveCommandsUsage(t *testing.T) {
	dir := t.TempDir()
	for _, args := range [][]string{
		{"run"},
		{"run", "--config", dockPostPath, "--log-level", "loud"},
		{"run", "--config", filepath.Join(dir, "absent.yaml")},
		{"record", "--broker", "tcp://127.0.0.1:1", "--out", filepath.Join(dir, "r.jsonl")},
		{"record", "--broker", "gopher://x", "--topic", "#", "--out", filepath.Join(dir, "r.jsonl")},
		{"record", "--topic", "#", "--out", filepath.Join(dir, "r.jsonl")},
		{"record", "--broker", "tcp://127.0.0.1:1", "--topic", "#", "--out", filepath.Join(dir, "r.jsonl"), "--seconds", "-1"},
	} {
		if code, _, _ := runCmd(t, nil, args...); code != exitUsage {
			t.Errorf("%v: exit %d, want %d", args, code, exitUsage)
		}
	}
	// Every command's --help carries an example (the brief's rule).
	for _, c := range newRootCmd().Commands() {
		code, out, _ := runCmd(t, nil, c.Name(), "--help")
		if code != exitOK || !strings.Contains(out, "Examples:") {
			t.Errorf("%s --help: exit %d, no example", c.Name(), code)
		}
	}
}

// replay --to-broker puts a recording back on the wire at its pace, t_ns
// shifted by one constant; a live daemon fuses it into tracks.
func TestReplayToBroker(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	path, cfg := liveConfigFile(t, b.URL())
	msgs := gatesim.Gate(cfg, 1500*time.Millisecond, 8)
	// A message on a topic the configuration does not know is not re-sent.
	msgs = append(msgs, gatesim.Msg{RxNs: msgs[len(msgs)-1].RxNs, Topic: "elsewhere/x", Payload: []byte(`{"a":1}`)})
	rec := filepath.Join(t.TempDir(), "bench.jsonl")
	if err := os.WriteFile(rec, gatesim.Recording(msgs), 0o644); err != nil {
		t.Fatal(err)
	}
	watch := connectPeer(t, b.URL(), cfg.Broker.ClientID+"-watch", time.Second)
	defer watch.c.Disconnect(100)
	watch.sub(t, cfg.Broker.ClientID+"/#")
	watch.sub(t, "elsewhere/#")

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	daemonRes := startCmd(t, ctx, "run", "--config", path, "--log-level", "error")
	if !watch.await(5*time.Second, func(m paho.Message) bool { return string(m.Payload()) == "online" }) {
		t.Fatal("daemon not online")
	}
	start := time.Now()
	r := wait(t, startCmd(t, context.Background(), "replay", "--config", path, "--in", rec, "--to-broker", b.URL()), 20*time.Second)
	if r.code != exitOK {
		t.Fatalf("replay --to-broker: exit %d\n%s", r.code, r.err)
	}
	// At the recorded pace the last message goes out about 1.5 s after the first.
	if el := time.Since(start); el < time.Second {
		t.Errorf("1.5 s of recording sent in %v: not paced", el)
	}
	if !strings.HasPrefix(r.out, fmt.Sprintf("sent %d messages", len(msgs)-1)) || !strings.Contains(r.out, "1 on other topics skipped") {
		t.Fatalf("replay --to-broker printed %q", r.out)
	}
	if !watch.await(3*time.Second, func(m paho.Message) bool {
		return m.Topic() == cfg.Output.TracksTopic && strings.Contains(string(m.Payload()), `"status":"confirmed"`)
	}) {
		t.Error("the live daemon made no confirmed track from the re-published recording")
	}
	cancel()
	if dr := wait(t, daemonRes, 10*time.Second); dr.code != exitOK {
		t.Fatalf("run: exit %d\n%s", dr.code, dr.err)
	}

	// Every sensor message arrived once, in order, with one constant t_ns
	// shift. The broker acknowledged the last one before replay returned;
	// its delivery to the watcher may still be under way.
	var got []paho.Message
	for deadline := time.Now().Add(3 * time.Second); ; {
		got = got[:0]
		watch.mu.Lock()
		for _, m := range watch.msgs {
			if strings.Contains(m.Topic(), "/sensors/") || strings.HasPrefix(m.Topic(), "elsewhere/") {
				got = append(got, m)
			}
		}
		watch.mu.Unlock()
		if len(got) >= len(msgs)-1 || time.Now().After(deadline) {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	if len(got) != len(msgs)-1 {
		t.Fatalf("broker carried %d sensor messages, recording has %d", len(got), len(msgs)-1)
	}
	var shift int64
	for i, m := range got {
		var v struct {
			TNs int64 `json:"t_ns"`
		}
		if err := json.Unmarshal(m.Payload(), &v); err != nil || m.Topic() != msgs[i].Topic {
			t.Fatalf("message %d: %v on %s, want topic %s", i, err, m.Topic(), msgs[i].Topic)
		}
		if i == 0 {
			shift = v.TNs - msgs[0].TNs
		} else if v.TNs-msgs[i].TNs != shift {
			t.Fatalf("message %d shifted by %d, the first by %d", i, v.TNs-msgs[i].TNs, shift)
		}
	}
	// The shift makes the first message current (within a second of the send).
	if now := time.Now().UnixNano(); msgs[0].TNs+shift > now || msgs[0].TNs+shift < start.UnixNano()-int64(time.Second) {
		t.Errorf("retimed first t_ns %d is not near the send time %d", msgs[0].TNs+shift, start.UnixNano())
	}
}
