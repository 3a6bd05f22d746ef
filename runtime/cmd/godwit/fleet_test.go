package main

import (
	"bytes"
	"context"
	"encoding/json"
	"net/http"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/transport/broker"
	"go.uber.org/goleak"
)

func TestFleetUsage(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"fleet"}, "required flag"},
		{[]string{"fleet", "--broker", "tcp://127.0.0.1:1", "--share", "a/b"}, "--share"},
		{[]string{"fleet", "--broker", "tcp://127.0.0.1:1", "--silent-after", "0s"}, "--silent-after"},
		{[]string{"fleet", "--broker", "tcp://127.0.0.1:1", "--topic-root", "godwit/#"}, "--topic-root"},
		{[]string{"fleet", "--broker", "tcp://127.0.0.1:1", "--history", "0"}, "--history"},
		{[]string{"fleet", "--broker", "ftp://127.0.0.1:1", "--listen", "127.0.0.1:0"}, "ftp"},
		{[]string{"fleet", "--broker", "tcp://127.0.0.1:1", "extra"}, "unknown command"},
	} {
		code, _, stderr := runCmd(t, nil, c.args...)
		if code != exitUsage || !strings.Contains(stderr, c.want) {
			t.Errorf("%v: exit %d, stderr %q; want exit %d mentioning %q", c.args, code, stderr, exitUsage, c.want)
		}
	}
	code, out, _ := runCmd(t, nil, "fleet", "--help")
	if code != exitOK || !strings.Contains(out, "Examples:") || !strings.Contains(out, "godwit fleet --broker") {
		t.Fatalf("help: exit %d\n%s", code, out)
	}
}

// syncBuffer is a bytes.Buffer safe for the command writing while the test reads.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// godwit fleet serves its API over a live broker and stops cleanly (exit 0)
// when its context ends, as on SIGINT.
func TestFleetServesAndStops(t *testing.T) {
	before := goleak.IgnoreCurrent()
	t.Cleanup(func() { goleak.VerifyNone(t, before) })
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = b.Close() })
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var out, errb syncBuffer
	done := make(chan int, 1)
	go func() {
		done <- runContext(ctx, []string{"fleet", "--broker", b.URL(), "--listen", "127.0.0.1:0",
			"--topic-root", "cmdtest", "--log-level", "error"}, &out, &errb)
	}()
	re := regexp.MustCompile(`fleet page at (http://\S+/)`)
	var base string
	for deadline := time.Now().Add(5 * time.Second); base == ""; time.Sleep(20 * time.Millisecond) {
		if m := re.FindStringSubmatch(out.String()); m != nil {
			base = m[1]
		} else if time.Now().After(deadline) {
			t.Fatalf("no page address printed; stdout %q stderr %q", out.String(), errb.String())
		}
	}
	if err := b.Publish("cmdtest/yard-tractor-2/status", []byte("online"), false, 1); err != nil {
		t.Fatal(err)
	}
	var got struct {
		Vehicles []struct {
			Vehicle, State string
		} `json:"vehicles"`
	}
	for deadline := time.Now().Add(5 * time.Second); len(got.Vehicles) == 0; time.Sleep(20 * time.Millisecond) {
		resp, err := http.Get(base + "api/vehicles")
		if err == nil {
			_ = json.NewDecoder(resp.Body).Decode(&got)
			resp.Body.Close()
		}
		if time.Now().After(deadline) {
			t.Fatal("the vehicle never appeared in /api/vehicles")
		}
	}
	if got.Vehicles[0].Vehicle != "yard-tractor-2" || got.Vehicles[0].State != "unknown" {
		t.Fatalf("vehicles %+v", got.Vehicles)
	}
	http.DefaultClient.CloseIdleConnections()
	cancel()
	select {
	case code := <-done:
		if code != exitOK {
			t.Fatalf("exit %d after cancel, want 0; stderr %q", code, errb.String())
		}
	case <-time.After(10 * time.Second):
		t.Fatal("fleet did not stop after cancel")
	}
}
