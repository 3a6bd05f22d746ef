package bench

import (
	"bufio"
	"context"
	"fmt"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"

	"github.com/godwit-fusion/godwit/runtime/daemon"
)

// godwitCounts are the counters of the godwit under test the MQTT rows
// read: messages its pipeline took, and messages its queue dropped.
type godwitCounts struct {
	Taken, Dropped uint64
}

// godwitUnderTest is the daemon of the godwit path: in this process, or
// this binary started as "godwit run" in its own process, as on a vehicle
// (then the bench's own clients and embedded broker share neither its
// garbage collector nor its scheduler).
type godwitUnderTest interface {
	counts() (godwitCounts, error)
	where() string
	stop()
}

// inProcess runs the daemon on a goroutine of the bench.
type inProcess struct {
	d      *daemon.Daemon
	cancel context.CancelFunc
	done   chan error
}

func startInProcess(ctx context.Context, p ConfigParams) (*inProcess, error) {
	cfg, err := Config(p)
	if err != nil {
		return nil, err
	}
	d, err := daemon.New(daemon.Options{Config: cfg, HealthPeriod: time.Second})
	if err != nil {
		return nil, err
	}
	dctx, cancel := context.WithCancel(ctx)
	g := &inProcess{d: d, cancel: cancel, done: make(chan error, 1)}
	go func() { g.done <- d.Run(dctx) }()
	return g, nil
}

func (g *inProcess) counts() (godwitCounts, error) {
	s := g.d.Stats()
	return godwitCounts{Taken: s.Pipeline.Messages, Dropped: s.QueueDropped}, nil
}

func (g *inProcess) where() string { return "in the bench's process" }

func (g *inProcess) stop() { g.cancel(); <-g.done }

// ownProcess is exe started as "exe run --config FILE", read through its
// Prometheus endpoint.
type ownProcess struct {
	cmd     *exec.Cmd
	done    chan error
	dir     string
	metrics string
	http    *http.Client
	last    godwitCounts // the latest scrape, taken at lastAt
	lastAt  time.Time
}

func startOwnProcess(ctx context.Context, exe string, p ConfigParams, cpuProfile string) (*ownProcess, error) {
	addr, err := freeLoopback()
	if err != nil {
		return nil, err
	}
	p.Metrics = addr
	dir, err := os.MkdirTemp("", "godwit-bench-")
	if err != nil {
		return nil, err
	}
	cfgPath := filepath.Join(dir, "bench-post.yaml")
	if err := os.WriteFile(cfgPath, []byte(ConfigYAML(p)), 0o600); err != nil {
		os.RemoveAll(dir)
		return nil, err
	}
	args := []string{"run", "--config", cfgPath, "--log-level", "error"}
	if cpuProfile != "" {
		args = append(args, "--cpuprofile", cpuProfile)
	}
	cmd := exec.CommandContext(ctx, exe, args...)
	if err := cmd.Start(); err != nil {
		os.RemoveAll(dir)
		return nil, err
	}
	// Uncompressed: gzip on every scrape would cost the process under
	// test CPU the bench is measuring.
	g := &ownProcess{cmd: cmd, done: make(chan error, 1), dir: dir, metrics: "http://" + addr + "/metrics",
		http: &http.Client{Timeout: 2 * time.Second, Transport: &http.Transport{DisableCompression: true}}}
	go func() { g.done <- cmd.Wait() }()
	return g, nil
}

// freeLoopback is a loopback address with a port free a moment ago.
func freeLoopback() (string, error) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return "", err
	}
	defer ln.Close()
	return ln.Addr().String(), nil
}

// scrapeEvery bounds how often counts scrapes the child: the callers poll
// every few milliseconds, and each scrape is work for the process under
// test. Counts are then at most this old.
const scrapeEvery = 10 * time.Millisecond

func (g *ownProcess) counts() (godwitCounts, error) {
	if time.Since(g.lastAt) < scrapeEvery {
		return g.last, nil
	}
	c, err := g.scrape()
	if err == nil {
		g.last, g.lastAt = c, time.Now()
	}
	return c, err
}

func (g *ownProcess) scrape() (godwitCounts, error) {
	resp, err := g.http.Get(g.metrics)
	if err != nil {
		return godwitCounts{}, fmt.Errorf("bench: godwit metrics: %w", err)
	}
	defer resp.Body.Close()
	var c godwitCounts
	sc := bufio.NewScanner(resp.Body)
	for sc.Scan() {
		line := sc.Text()
		name, value, ok := sampleLine(line)
		if !ok {
			continue
		}
		switch name {
		case "godwit_measurements_received_total":
			c.Taken += uint64(value)
		case "godwit_queue_dropped_total":
			c.Dropped += uint64(value)
		}
	}
	return c, sc.Err()
}

// sampleLine splits a Prometheus text-format sample "name{labels} value"
// into the metric name and the value.
func sampleLine(line string) (string, float64, bool) {
	if line == "" || line[0] == '#' {
		return "", 0, false
	}
	sp := strings.LastIndexByte(line, ' ')
	if sp < 0 {
		return "", 0, false
	}
	v, err := strconv.ParseFloat(line[sp+1:], 64)
	if err != nil {
		return "", 0, false
	}
	name := line[:sp]
	if i := strings.IndexByte(name, '{'); i >= 0 {
		name = name[:i]
	}
	return name, v, true
}

func (g *ownProcess) where() string { return "in its own process (godwit run)" }

func (g *ownProcess) stop() {
	_ = g.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-g.done:
	case <-time.After(5 * time.Second):
		_ = g.cmd.Process.Kill()
		<-g.done
	}
	os.RemoveAll(g.dir)
}

// exited reports the process's end, if it has ended.
func (g *ownProcess) exited() (error, bool) {
	select {
	case err := <-g.done:
		g.done <- err
		return err, true
	default:
		return nil, false
	}
}
