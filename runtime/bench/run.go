package bench

import (
	"context"
	"fmt"
	"io"
	"runtime"
	"time"
)

// Options choose what Run measures and how long.
type Options struct {
	// FilterTime is the measuring time per filter and per baseline; 0 means 1 s.
	FilterTime time.Duration
	// EngineSeconds is the scene length of the engine rows; 0 means 10 s.
	EngineSeconds float64
	// Detections is the size of the decode+engine+encode replay after
	// warm-up; 0 means 1 000 000.
	Detections int
	// MQTT runs the MQTT rows when BrokerURL is set.
	MQTT MQTTOptions
	// StartBroker, when set and MQTT.BrokerURL is empty, starts a broker
	// just before the MQTT rows (an embedded one, so that it does not run,
	// and allocate, during the rows measured before); stop ends it.
	StartBroker func() (url string, stop func(), err error)
	// Executable, when set, is a godwit binary for the process row (run
	// against MQTT.BrokerURL).
	Executable string
	// Sections limits the run to these sections (filter, engine,
	// pipeline, mqtt, process); empty means all.
	Sections []string
	// Progress, when set, gets one line as each section starts.
	Progress io.Writer
}

// Sections are the bench's parts, in the order they run.
var Sections = []string{"filter", "engine", "pipeline", "mqtt", "process"}

// Run measures the standard workloads one after another in this process and
// returns the table. A section that fails is reported in Errors and the
// others still run.
func Run(ctx context.Context, o Options) *Report {
	if o.FilterTime <= 0 {
		o.FilterTime = time.Second
	}
	if o.EngineSeconds <= 0 {
		o.EngineSeconds = 10
	}
	if o.Detections <= 0 {
		o.Detections = 1_000_000
	}
	rep := &Report{GoVersion: runtime.Version(), OS: runtime.GOOS, Arch: runtime.GOARCH,
		CPUs: runtime.NumCPU(), Broker: o.MQTT.BrokerURL}
	want := func(s string) bool {
		if len(o.Sections) == 0 {
			return true
		}
		for _, x := range o.Sections {
			if x == s {
				return true
			}
		}
		return false
	}
	say := func(s string) {
		if o.Progress != nil {
			fmt.Fprintf(o.Progress, "bench: %s …\n", s)
		}
	}
	fail := func(sec string, err error) { rep.Errors = append(rep.Errors, sec+": "+err.Error()) }
	if want("filter") && ctx.Err() == nil {
		say("filter steps")
		rows, err := FilterRows(o.FilterTime)
		rep.Rows = append(rep.Rows, rows...)
		if err != nil {
			fail("filter", err)
		}
	}
	if want("engine") {
		// Clutter grows with the scene, as a busier scene has more returns.
		for _, w := range []struct {
			targets int
			clutter float64
		}{{50, 5}, {1000, 20}} {
			if ctx.Err() != nil {
				break
			}
			say(fmt.Sprintf("engine, %d targets", w.targets))
			r, err := EngineRow(w.targets, w.clutter, o.EngineSeconds)
			if err != nil {
				fail("engine", err)
				continue
			}
			rep.Rows = append(rep.Rows, r)
		}
	}
	if want("pipeline") && ctx.Err() == nil {
		say(fmt.Sprintf("decode+engine+encode, %d detections", o.Detections))
		r, err := PipelineRow(o.Detections)
		if err != nil {
			fail("pipeline", err)
		} else {
			rep.Rows = append(rep.Rows, r)
		}
	}
	if (want("mqtt") || want("process")) && o.MQTT.BrokerURL == "" && o.StartBroker != nil && ctx.Err() == nil {
		url, stop, err := o.StartBroker()
		if err != nil {
			fail("mqtt", err)
		} else {
			defer stop()
			o.MQTT.BrokerURL = url
			rep.Broker = "embedded " + url
		}
	}
	if want("mqtt") && o.MQTT.BrokerURL != "" && ctx.Err() == nil {
		say("MQTT paths on " + o.MQTT.BrokerURL)
		rows, err := MQTTRows(ctx, o.MQTT)
		rep.Rows = append(rep.Rows, rows...)
		if err != nil {
			fail("mqtt", err)
		}
	}
	if want("process") && o.Executable != "" && o.MQTT.BrokerURL != "" && ctx.Err() == nil {
		say("godwit run as a process, 500 targets")
		r, err := ProcessRow(ctx, o.Executable, o.MQTT.BrokerURL)
		if err != nil {
			fail("process", err)
		} else {
			rep.Rows = append(rep.Rows, r)
		}
	}
	return rep
}
