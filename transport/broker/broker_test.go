package broker_test

import (
	"fmt"
	"io"
	"net"
	"strings"
	"sync"
	"testing"
	"time"

	"go.uber.org/goleak"

	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/broker"
	"github.com/godwit-fusion/godwit/transport/mqtt"
)

func TestMain(m *testing.M) { goleak.VerifyTestMain(m) }

func TestStartRestartClose(t *testing.T) {
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(b.URL(), "tcp://127.0.0.1:") || strings.HasSuffix(b.URL(), ":0") {
		t.Errorf("url %s", b.URL())
	}
	addr := b.Addr()
	if c, err := net.Dial("tcp", addr); err != nil {
		t.Fatalf("not listening: %v", err)
	} else {
		c.Close()
	}
	// mochi-mqtt's Server.Close races with a connection its listener is still
	// accepting (seen with -race); let the probe connection settle first.
	time.Sleep(100 * time.Millisecond)
	if err := b.Close(); err != nil {
		t.Fatal(err)
	}
	if err := b.Close(); err != broker.ErrClosed {
		t.Errorf("second close: %v", err)
	}
	if _, err := net.DialTimeout("tcp", addr, time.Second); err == nil {
		t.Error("still listening after Close")
	}
	// Back on the same address, as the fault tests need.
	b2, err := broker.Start(broker.Config{Addr: addr})
	if err != nil {
		t.Fatal(err)
	}
	defer b2.Close()
	if b2.Addr() != addr {
		t.Errorf("restarted on %s, want %s", b2.Addr(), addr)
	}
	// A second broker cannot take a busy address.
	if b3, err := broker.Start(broker.Config{Addr: addr}); err == nil {
		b3.Close()
		t.Error("two brokers on one address")
	}
}

// TestRetainedFromBroker: a retained message published by the broker itself
// reaches a client that subscribes later (MQTT 3.1.1 §3.3.1.3).
func TestRetainedFromBroker(t *testing.T) {
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	if err := b.Publish("demo/status", []byte("online"), true, 1); err != nil {
		t.Fatal(err)
	}
	q := transport.NewQueue(4, 64, 1024)
	c, err := mqtt.New(mqtt.Options{URL: b.URL(), ClientID: "late-subscriber", CleanSession: true})
	if err != nil {
		t.Fatal(err)
	}
	c.Subscribe("demo/status", 1, q)
	c.Start()
	defer c.Close()
	var in transport.Inbound
	deadline := time.After(5 * time.Second)
	for !q.Pop(&in) {
		select {
		case <-q.Ready():
		case <-deadline:
			t.Fatal("retained message not delivered")
		}
	}
	if string(in.Payload) != "online" || !in.Retained {
		t.Errorf("got %q retained=%v", in.Payload, in.Retained)
	}
}

// TestCloseWhileClientsLeave: Close returns while connected clients drop
// their connections at the same moment. Each clean-session client that
// leaves removes itself from the broker's client map; mochi's own shutdown
// could deadlock against that removal (see Broker.Close). With mochi's own
// shutdown this test hung within 30 runs of 40 rounds (-race, 2 cores).
func TestCloseWhileClientsLeave(t *testing.T) {
	rounds := 40
	if testing.Short() {
		rounds = 5
	}
	for r := 0; r < rounds; r++ {
		b, err := broker.Start(broker.Config{})
		if err != nil {
			t.Fatal(err)
		}
		var conns []net.Conn
		for i := 0; i < 8; i++ {
			conns = append(conns, connectRaw(t, b.Addr(), fmt.Sprintf("leaver-%d-%d", r, i)))
		}
		closed := make(chan error, 1)
		var wg sync.WaitGroup
		for _, c := range conns {
			wg.Add(1)
			go func(c net.Conn) { defer wg.Done(); c.Close() }(c)
		}
		go func() { closed <- b.Close() }()
		select {
		case err := <-closed:
			if err != nil {
				t.Fatalf("round %d: %v", r, err)
			}
		case <-time.After(10 * time.Second):
			t.Fatalf("round %d: Close still running after 10 s", r)
		}
		wg.Wait()
	}
}

// connectRaw opens an MQTT 3.1.1 clean session by hand (CONNECT, §3.1;
// CONNACK, §3.2) and returns the connection once the broker accepted it.
func connectRaw(t *testing.T, addr, id string) net.Conn {
	t.Helper()
	c, err := net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	body := []byte{0, 4, 'M', 'Q', 'T', 'T', 4, 0x02, 0, 60, 0, byte(len(id))}
	body = append(body, id...)
	if _, err := c.Write(append([]byte{0x10, byte(len(body))}, body...)); err != nil {
		t.Fatal(err)
	}
	ack := make([]byte, 4)
	c.SetReadDeadline(time.Now().Add(5 * time.Second))
	if _, err := io.ReadFull(c, ack); err != nil {
		t.Fatalf("no CONNACK for %s: %v", id, err)
	}
	if ack[0] != 0x20 || ack[3] != 0 {
		t.Fatalf("CONNACK for %s: % x", id, ack)
	}
	return c
}
