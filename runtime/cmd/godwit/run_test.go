package main

import (
	"context"
	"io"
	"net"
	"net/http"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/transport/broker"
	"go.uber.org/goleak"
)

// godwit run serves /metrics, /healthz and /readyz on metrics.listen while
// it runs, and closes the listener on a graceful stop.
func TestRunServesMetrics(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	path, cfg := liveConfigFile(t, b.URL())
	cfg.Metrics.Listen = freeLoopbackAddr(t)
	text, err := configs.Marshal(cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, text, 0o644); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	res := startCmd(t, ctx, "run", "--config", path, "--log-level", "error")

	client := &http.Client{Timeout: 3 * time.Second, Transport: &http.Transport{DisableKeepAlives: true}}
	get := func(p string) (int, string) {
		resp, err := client.Get("http://" + cfg.Metrics.Listen + p)
		if err != nil {
			return 0, err.Error()
		}
		defer resp.Body.Close()
		body, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, string(body)
	}
	ready := false
	for deadline := time.Now().Add(8 * time.Second); !ready && time.Now().Before(deadline); time.Sleep(20 * time.Millisecond) {
		code, _ := get("/readyz")
		ready = code == http.StatusOK
	}
	if !ready {
		code, body := get("/readyz")
		t.Fatalf("/readyz not 200 within 8 s: %d %q", code, body)
	}
	if code, body := get("/healthz"); code != http.StatusOK {
		t.Errorf("/healthz: %d %q", code, body)
	}
	code, body := get("/metrics")
	// The info series carries the configured vehicle (dock-post.yaml).
	if want := `godwit_vehicle_info{vehicle="dock-post-2"} 1`; code != http.StatusOK || !strings.Contains(body, want) {
		t.Errorf("/metrics: %d, no line %q in\n%.500s", code, want, body)
	}
	if !strings.Contains(body, "godwit_broker_connected 1") {
		t.Error("/metrics does not report the broker connection")
	}
	cancel()
	if r := wait(t, res, 10*time.Second); r.code != exitOK {
		t.Fatalf("run: exit %d\n%s", r.code, r.err)
	}
	if c, err := net.DialTimeout("tcp", cfg.Metrics.Listen, time.Second); err == nil {
		c.Close()
		t.Error("metrics listener still open after the graceful stop")
	}
}
