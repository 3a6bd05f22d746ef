package bench

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strconv"
	"strings"
	"time"
)

// ProcessResult is what ProcessRun measured of a godwit process.
type ProcessResult struct {
	StartToOutput time.Duration // exec → first tracks message received
	LiveTracks    int           // tracks in the last message of the load phase
	RSSBytes      uint64        // resident set size (VmRSS) with them
}

// ProcessRun starts exe as `exe run --config FILE` against brokerURL and
// measures, from outside, the time from exec to the first tracks message
// (a probe scan is published every millisecond, so this is start →
// subscribed plus at most 1 ms plus one scan), then feeds targets live
// targets at 10 Hz per sensor for load and reads the process's resident
// memory (Linux /proc/PID/status VmRSS). It stops the process with SIGTERM.
func ProcessRun(ctx context.Context, exe, brokerURL string, targets int, load time.Duration) (ProcessResult, error) {
	var res ProcessResult
	pub, err := connect(brokerURL, fmt.Sprintf("godwit-bench-procpub-%d", time.Now().UnixNano()))
	if err != nil {
		return res, err
	}
	defer pub.Disconnect(100)
	sub, err := connect(brokerURL, fmt.Sprintf("godwit-bench-procsub-%d", time.Now().UnixNano()))
	if err != nil {
		return res, err
	}
	defer sub.Disconnect(100)
	var rcv receiver
	rcv.keep.Store(false)
	if err := subscribe(sub, TracksTopic, 0, &rcv); err != nil {
		return res, err
	}
	live := NewLive(targets, 2, 1)
	probe := NewLive(1, 0, 2)
	start := time.Now()
	g, err := startOwnProcess(ctx, exe, ConfigParams{BrokerURL: brokerURL,
		ClientID: fmt.Sprintf("godwit-bench-proc-%d", time.Now().UnixNano())}, "")
	if err != nil {
		return res, err
	}
	defer g.stop()
	for rcv.count.Load() == 0 {
		if time.Since(start) > 10*time.Second {
			return res, errors.New("bench: the godwit process gave no tracks message within 10 s")
		}
		if err, gone := g.exited(); gone {
			return res, fmt.Errorf("bench: the godwit process exited early: %v", err)
		}
		b, err := probe.Next(false, time.Now().UnixNano())
		if err != nil {
			return res, err
		}
		pub.Publish(LidarTopic, 0, false, append([]byte(nil), b...)).Wait()
		time.Sleep(time.Millisecond)
	}
	res.StartToOutput = time.Since(start)
	// Load: both sensors at 10 Hz with the live scene.
	rcv.reset(false)
	tick := time.NewTicker(50 * time.Millisecond)
	defer tick.Stop()
	end := time.Now().Add(load)
	radar := false
	for time.Now().Before(end) {
		<-tick.C
		topic := LidarTopic
		if radar {
			topic = RadarTopic
		}
		b, err := live.Next(radar, time.Now().UnixNano())
		if err != nil {
			return res, err
		}
		pub.Publish(topic, 0, false, append([]byte(nil), b...)).Wait()
		radar = !radar
	}
	time.Sleep(200 * time.Millisecond)
	res.LiveTracks = rcv.lastTracks()
	res.RSSBytes = procRSS(g.cmd.Process.Pid)
	return res, nil
}

// procRSS reads VmRSS of a process (Linux); 0 when unknown.
func procRSS(pid int) uint64 {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		return 0
	}
	for _, line := range strings.Split(string(b), "\n") {
		if f := strings.Fields(line); len(f) >= 2 && f[0] == "VmRSS:" {
			kb, err := strconv.ParseUint(f[1], 10, 64)
			if err == nil {
				return kb << 10
			}
		}
	}
	return 0
}

// ProcessRow runs ProcessRun with 500 targets for 5 s of load.
func ProcessRow(ctx context.Context, exe, brokerURL string) (Row, error) {
	res, err := ProcessRun(ctx, exe, brokerURL, 500, 5*time.Second)
	if err != nil {
		return Row{}, err
	}
	r := Row{Section: "process", Name: "godwit run: start and memory"}
	r.add("start→first tracks msg", float64(res.StartToOutput.Microseconds())*1e-3, "ms")
	r.add("live tracks", float64(res.LiveTracks), "")
	r.add("RSS", float64(res.RSSBytes)/(1<<20), "MiB")
	r.Note = "exec of this binary to the first tracks message; RSS (VmRSS) after 5 s of 500 targets at 10 Hz per sensor"
	return r, nil
}
