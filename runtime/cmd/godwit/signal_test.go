package main

import (
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
)

// The built binary under a real SIGTERM (DESIGN.md: graceful stop, exit 0,
// status offline). The in-process tests cancel a context instead; this one
// checks main's signal wiring.
func TestRunBinaryStopsOnSIGTERM(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "godwit")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Skipf("cannot build the binary here: %v\n%s", err, out)
	}
	url := "tcp://" + freeLoopbackAddr(t)
	path, cfg := liveConfigFile(t, url)
	cmd := exec.Command(bin, "run", "--config", path, "--embedded-broker")
	var logs strings.Builder
	cmd.Stderr = &logs
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer cmd.Process.Kill()
	watch := connectPeer(t, url, cfg.Broker.ClientID+"-watch", 10*time.Second)
	watch.sub(t, cfg.Output.StatusTopic)
	if !watch.await(5*time.Second, func(m paho.Message) bool { return string(m.Payload()) == "online" }) {
		t.Fatalf("no online status\n%s", logs.String())
	}
	if err := cmd.Process.Signal(syscall.SIGTERM); err != nil {
		t.Fatal(err)
	}
	// The broker lives in the same process, so the last message a
	// subscriber can see is the offline status sent before it closes.
	offline := watch.await(5*time.Second, func(m paho.Message) bool { return string(m.Payload()) == "offline" })
	errc := make(chan error, 1)
	go func() { errc <- cmd.Wait() }()
	select {
	case err := <-errc:
		if err != nil {
			t.Fatalf("exit after SIGTERM: %v\n%s", err, logs.String())
		}
	case <-time.After(10 * time.Second):
		t.Fatal("no exit within 10 s of SIGTERM")
	}
	watch.c.Disconnect(100)
	if !offline {
		t.Errorf("no offline status before exit\n%s", logs.String())
	}
	// Not a terminal: the logs are JSON lines (zap's JSON encoder).
	first := strings.SplitN(logs.String(), "\n", 2)[0]
	if !strings.HasPrefix(first, "{") {
		t.Errorf("log line is not JSON: %q", first)
	}
}
