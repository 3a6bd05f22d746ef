package fleet

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/broker"
	"github.com/godwit-fusion/godwit/transport/mqtt"
	"go.uber.org/goleak"
)

var rootSeq atomic.Int64

// uniqueRoot is a topic root no other test (or run on a shared broker)
// uses, so retained messages of one cannot reach another.
func uniqueRoot() string {
	return fmt.Sprintf("gwfleet-%d-%d-%d", os.Getpid(), time.Now().UnixNano()%1e9, rootSeq.Add(1))
}

// brokers yields the embedded broker always, and GODWIT_TEST_BROKER (e.g.
// Mosquitto) when it is set.
func brokers(t *testing.T, run func(t *testing.T, url string, b *broker.Broker)) {
	// Cleanups run last-in first-out: the leak check after the broker's
	// close, which comes after the monitors' (registered inside run).
	t.Run("embedded", func(t *testing.T) {
		before := goleak.IgnoreCurrent()
		t.Cleanup(func() { goleak.VerifyNone(t, before) })
		b, err := broker.Start(broker.Config{})
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { _ = b.Close() })
		run(t, b.URL(), b)
	})
	if u := os.Getenv("GODWIT_TEST_BROKER"); u != "" {
		t.Run("env", func(t *testing.T) {
			before := goleak.IgnoreCurrent()
			t.Cleanup(func() { goleak.VerifyNone(t, before) })
			run(t, u, nil)
		})
	} else {
		t.Log("GODWIT_TEST_BROKER not set: external broker run skipped")
	}
}

// startMonitor runs a monitor on a free port until the test ends.
func startMonitor(t *testing.T, url string, sc StoreConfig, share string) *Monitor {
	t.Helper()
	m, err := New(Options{BrokerURL: url, Listen: "127.0.0.1:0", Store: sc, Share: share,
		MQTT: func(o *mqtt.Options) { o.MinBackoff, o.MaxBackoff = 20*time.Millisecond, 200*time.Millisecond }})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- m.Run(ctx) }()
	t.Cleanup(func() {
		cancel()
		if err := <-done; err != nil {
			t.Errorf("monitor: %v", err)
		}
		http.DefaultClient.CloseIdleConnections()
	})
	if !m.client.WaitConnected(5 * time.Second) {
		t.Fatal("monitor did not connect")
	}
	waitFor(t, 5*time.Second, "ready", func() bool {
		resp, err := http.Get("http://" + m.Addr() + "/readyz")
		if err != nil {
			return false
		}
		resp.Body.Close()
		return resp.StatusCode == 200
	})
	return m
}

func waitFor(t *testing.T, timeout time.Duration, what string, ok func() bool) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for !ok() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out after %v waiting for %s", timeout, what)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// apiVehicle reads one vehicle from the monitor's JSON API, as an operator's
// script would.
func apiVehicle(m *Monitor, id string) (VehicleView, bool) {
	resp, err := http.Get("http://" + m.Addr() + "/api/vehicles/" + id)
	if err != nil {
		return VehicleView{}, false
	}
	defer resp.Body.Close()
	var v VehicleView
	if resp.StatusCode != 200 || json.NewDecoder(resp.Body).Decode(&v) != nil {
		return VehicleView{}, false
	}
	return v, true
}

func apiEvents(t *testing.T, m *Monitor, id string) []Event {
	t.Helper()
	var as struct {
		Events []Event `json:"events"`
	}
	getJSON(t, "http://"+m.Addr()+"/api/alerts?vehicle="+id, &as)
	return as.Events
}

func sensorOf(v VehicleView, name string) (SensorView, bool) {
	for _, s := range v.Sensors {
		if s.Name == name {
			return s, true
		}
	}
	return SensorView{}, false
}

func hasAlert(v VehicleView, code, sensor string) bool {
	for _, a := range v.Alerts {
		if a.Code == code && a.Sensor == sensor {
			return true
		}
	}
	return false
}

// peerClient is a plain paho client standing for the sensor drivers.
func peerClient(t *testing.T, url, id string) paho.Client {
	t.Helper()
	c := paho.NewClient(paho.NewClientOptions().AddBroker(url).SetClientID(id).SetCleanSession(true).
		SetAutoReconnect(false).SetConnectTimeout(3 * time.Second))
	if tok := c.Connect(); !tok.WaitTimeout(5*time.Second) || tok.Error() != nil {
		t.Fatalf("peer cannot connect to %s: %v", url, tok.Error())
	}
	return c
}

// clearRetained leaves no retained message behind on a shared broker.
func clearRetained(c paho.Client, topics ...string) {
	for _, tp := range topics {
		c.Publish(tp, 1, true, []byte{}).WaitTimeout(3 * time.Second)
	}
}

// A real daemon (the dock-post example) reports over the broker; the
// monitor's API shows it, follows its sensors (the lidar going quiet and
// coming back shows in its age), mirrors the state the daemon itself
// publishes, and shows it offline when it stops.
func TestEndToEndDaemon(t *testing.T) {
	brokers(t, func(t *testing.T, url string, b *broker.Broker) {
		root := uniqueRoot()
		cfg, err := configs.Example("dock-post")
		if err != nil {
			t.Fatal(err)
		}
		id := cfg.Vehicle
		cfg.Broker.URL, cfg.Broker.ClientID = url, root+"-daemon"
		for i := range cfg.Sensors {
			cfg.Sensors[i].Topic = root + "-sensors/" + cfg.Sensors[i].Name
		}
		cfg.Output.TracksTopic = root + "/" + id + "/tracks"
		cfg.Output.HealthTopic = root + "/" + id + "/health"
		cfg.Output.StatusTopic = root + "/" + id + "/status"

		m := startMonitor(t, url, StoreConfig{TopicRoot: root, SilentAfter: 3 * time.Second}, "")
		peer := peerClient(t, url, root+"-peer")
		defer peer.Disconnect(100)
		defer clearRetained(peer, cfg.Output.HealthTopic, cfg.Output.StatusTopic)
		var mu sync.Mutex
		var lastState string // the state in the daemon's latest health message
		peer.Subscribe(cfg.Output.HealthTopic, 1, func(_ paho.Client, msg paho.Message) {
			var h struct {
				State string `json:"state"`
			}
			if json.Unmarshal(msg.Payload(), &h) == nil && h.State != "" {
				mu.Lock()
				lastState = h.State
				mu.Unlock()
			}
		}).WaitTimeout(3 * time.Second)

		d, err := daemon.New(daemon.Options{Config: cfg, HealthPeriod: 200 * time.Millisecond,
			MQTT: func(o *mqtt.Options) { o.MinBackoff, o.MaxBackoff = 20*time.Millisecond, 200*time.Millisecond }})
		if err != nil {
			t.Fatal(err)
		}
		ctx, cancel := context.WithCancel(context.Background())
		ddone := make(chan error, 1)
		go func() { ddone <- d.Run(ctx) }()
		stopDaemon := sync.OnceFunc(func() { cancel(); <-ddone })
		defer stopDaemon()

		// The sensor drivers: radar every 50 ms, lidar every 100 ms (the
		// periods of configs/dock-post.yaml), lidar switchable.
		var lidarOn atomic.Bool
		lidarOn.Store(true)
		scene := gatesim.NewScene(cfg, time.Now().UnixNano(), 7)
		stopFeed := make(chan struct{})
		var wg sync.WaitGroup
		wg.Add(1)
		go func() {
			defer wg.Done()
			tick := time.NewTicker(50 * time.Millisecond)
			defer tick.Stop()
			var seq [2]uint64
			for n := 0; ; n++ {
				select {
				case <-stopFeed:
					return
				case now := <-tick.C:
					for i, s := range cfg.Sensors {
						if s.Kind == configs.KindPositionXY && (n%2 != 0 || !lidarOn.Load()) {
							continue
						}
						seq[i]++
						peer.Publish(s.Topic, 1, false, scene.Payload(i, seq[i], now.UnixNano())).WaitTimeout(time.Second)
					}
				}
			}
		}()
		defer func() { close(stopFeed); wg.Wait() }()

		lidar := cfg.Sensors[1].Name
		if cfg.Sensors[1].Kind != configs.KindPositionXY {
			t.Fatal("dock-post example changed: sensor 1 is not the lidar")
		}
		var v VehicleView
		waitFor(t, 10*time.Second, "the vehicle with both sensors reporting", func() bool {
			var ok bool
			v, ok = apiVehicle(m, id)
			s, found := sensorOf(v, lidar)
			return ok && v.LastSeenNs > 0 && found && s.RateHz != nil && *s.RateHz > 5 && s.AgeMS != nil && *s.AgeMS < 300
		})
		if v.State != StateOK && v.State != StateDegraded {
			t.Fatalf("state %s while both sensors report", v.State)
		}

		// The lidar stops: its age in the monitor grows past three periods
		// (the default health.silent_periods, configs/defaults.go).
		lidarOn.Store(false)
		waitFor(t, 10*time.Second, "the silent lidar's age past 3 periods", func() bool {
			v, _ = apiVehicle(m, id)
			s, _ := sensorOf(v, lidar)
			return s.AgeMS != nil && *s.AgeMS > 3*cfg.Sensors[1].PeriodMS
		})
		time.Sleep(time.Second) // the engine's raise hysteresis (health.raise_ms 500 ms), with margin
		v, _ = apiVehicle(m, id)
		if hasAlert(v, "sensor_silent", lidar) {
			if v.State != StateDegraded {
				t.Fatalf("sensor_silent shown but state %s, want degraded", v.State)
			}
		} else {
			t.Logf("the daemon's health does not (yet) raise sensor_silent; state %s, alerts %+v "+
				"(the degraded path is covered by TestEndToEndScriptedVehicle)", v.State, v.Alerts)
		}
		// The monitor shows what the vehicle says: its state equals the one in
		// the daemon's latest health message once both have settled.
		waitFor(t, 5*time.Second, "the monitor to mirror the daemon's state", func() bool {
			v, _ = apiVehicle(m, id)
			mu.Lock()
			defer mu.Unlock()
			return v.Reported == lastState && v.State == lastState
		})

		// Recovery: the lidar reports again and its age falls back.
		lidarOn.Store(true)
		waitFor(t, 10*time.Second, "the lidar's age back under 3 periods", func() bool {
			v, _ = apiVehicle(m, id)
			s, _ := sensorOf(v, lidar)
			return s.AgeMS != nil && *s.AgeMS < 3*cfg.Sensors[1].PeriodMS && !hasAlert(v, "sensor_silent", lidar)
		})

		// A clean stop publishes "offline" on the status topic.
		stopDaemon()
		waitFor(t, 5*time.Second, "offline after the daemon stopped", func() bool {
			v, _ = apiVehicle(m, id)
			return v.State == StateOffline
		})
		evs := apiEvents(t, m, id)
		if last := evs[len(evs)-1]; last.Kind != EventState || last.To != StateOffline {
			t.Fatalf("last event %+v, want a state change to offline", last)
		}
		// Every message the daemon published met the monitor's reading of
		// the v1 contract.
		c := m.Store().Counters()
		for reason, n := range c.Rejected {
			if n != 0 {
				t.Errorf("%d of the daemon's messages refused as %s", n, reason)
			}
		}
		if c.Health < 5 {
			t.Errorf("only %d health messages accepted", c.Health)
		}
	})
}

// scriptedVehicle publishes real v1 health messages (godwit's encoder)
// through godwit's MQTT client, with "online" and the last will "offline"
// on its status topic as the daemon does.
type scriptedVehicle struct {
	t              *testing.T
	c              *mqtt.Client
	id, healthTope string
	tNs            atomic.Int64

	mu     sync.Mutex
	state  string
	alerts []transport.Alert
}

func newScriptedVehicle(t *testing.T, url, root, id string, will bool) *scriptedVehicle {
	t.Helper()
	o := mqtt.Options{URL: url, ClientID: root + "-" + id, CleanSession: true, QoS: 1,
		// A long backoff keeps it away after the broker drops it, so the
		// last will is what the monitor sees last.
		MinBackoff: 10 * time.Second, MaxBackoff: 10 * time.Second}
	if will {
		o.StatusTopic = root + "/" + id + "/status"
	}
	c, err := mqtt.New(o)
	if err != nil {
		t.Fatal(err)
	}
	c.Start()
	if !c.WaitConnected(5 * time.Second) {
		t.Fatal("vehicle did not connect")
	}
	v := &scriptedVehicle{t: t, c: c, id: id, healthTope: root + "/" + id + "/health"}
	v.tNs.Store(time.Now().UnixNano())
	return v
}

// beat re-publishes the latest report every period, as the daemon does
// once a second, until the returned stop is called.
func (v *scriptedVehicle) beat(period time.Duration) (stop func()) {
	done := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		tick := time.NewTicker(period)
		defer tick.Stop()
		for {
			select {
			case <-done:
				return
			case <-tick.C:
				v.mu.Lock()
				st, al := v.state, v.alerts
				v.mu.Unlock()
				if st != "" {
					_ = v.publish(st, al)
				}
			}
		}
	}()
	return sync.OnceFunc(func() { close(done); wg.Wait() })
}

func (v *scriptedVehicle) report(state string, alerts ...transport.Alert) {
	v.t.Helper()
	v.mu.Lock()
	v.state, v.alerts = state, alerts
	v.mu.Unlock()
	if err := v.publish(state, alerts); err != nil {
		v.t.Fatal(err)
	}
}

func (v *scriptedVehicle) publish(state string, alerts []transport.Alert) error {
	m := transport.HealthMsg{V: 1, Vehicle: v.id, TNs: v.tNs.Add(int64(200 * time.Millisecond)), State: state, Alerts: alerts,
		Sensors: []transport.SensorHealth{{Name: "front_lidar", RateHz: 10, AgeMS: 40, NISOK: true},
			{Name: "rear_camera", RateHz: 15, AgeMS: 30, NISOK: true}},
		LatencyMS: transport.Latency{P50: 1.1, P99: 3.9}}
	b, err := transport.AppendHealth(nil, &m)
	if err != nil {
		return err
	}
	return v.c.Publish(v.healthTope, b, 1, true)
}

// The degraded path of the end-to-end check, with v1 health messages
// encoded by transport.AppendHealth (the engine does not raise
// sensor_silent yet): a vehicle turns degraded with sensor_silent, the API
// shows it, it recovers, and when it stops reporting without a last will
// the monitor notices the silence by itself.
func TestEndToEndScriptedVehicle(t *testing.T) {
	brokers(t, func(t *testing.T, url string, b *broker.Broker) {
		root := uniqueRoot()
		m := startMonitor(t, url, StoreConfig{TopicRoot: root, SilentAfter: 1500 * time.Millisecond}, "")
		peer := peerClient(t, url, root+"-peer")
		defer peer.Disconnect(100)

		car := newScriptedVehicle(t, url, root, "campus-shuttle-3", true)
		defer car.c.Close()
		defer clearRetained(peer, root+"/campus-shuttle-3/health", root+"/campus-shuttle-3/status")
		car.report("ok")
		waitFor(t, 5*time.Second, "ok", func() bool { v, _ := apiVehicle(m, car.id); return v.State == StateOK })

		silent := transport.Alert{Code: "sensor_silent", Severity: "warning", Sensor: "rear_camera",
			SinceNs: car.tNs.Load(), Detail: "no message for 210 ms (period 66 ms)"}
		car.report("degraded", silent)
		var v VehicleView
		waitFor(t, 5*time.Second, "degraded with sensor_silent", func() bool {
			v, _ = apiVehicle(m, car.id)
			return v.State == StateDegraded && hasAlert(v, "sensor_silent", "rear_camera")
		})
		car.report("ok")
		waitFor(t, 5*time.Second, "recovered", func() bool {
			v, _ = apiVehicle(m, car.id)
			return v.State == StateOK && len(v.Alerts) == 0
		})
		var got []string
		for _, e := range apiEvents(t, m, car.id) {
			got = append(got, e.Kind+":"+e.Code+e.To)
		}
		want := []string{"state:unknown", "state:ok", "raised:sensor_silent", "state:degraded", "cleared:sensor_silent", "state:ok"}
		if fmt.Sprint(got) != fmt.Sprint(want) {
			t.Fatalf("history %v, want %v", got, want)
		}

		// Goes quiet while still connected (no will is sent): silent.
		waitFor(t, 5*time.Second, "silent without a last will", func() bool {
			v, _ = apiVehicle(m, car.id)
			return v.State == StateSilent
		})
		car.report("ok")
		waitFor(t, 5*time.Second, "back from silence", func() bool { v, _ = apiVehicle(m, car.id); return v.State == StateOK })

		// The connection drops without a DISCONNECT: the broker sends the
		// last will "offline" (MQTT 3.1.1 §3.1.2.5, from memory). Only the embedded
		// broker can drop a client on demand.
		if b != nil {
			if !b.Kick(root + "-" + car.id) {
				t.Fatal("kick: vehicle not connected")
			}
			waitFor(t, 5*time.Second, "offline from the last will", func() bool {
				v, _ = apiVehicle(m, car.id)
				return v.State == StateOffline
			})
		}
	})
}

// Two monitors in one shared subscription group split the messages: each
// message reaches exactly one of them (MQTT 5.0 §4.8.2, from memory).
func TestSharedSubscriptionSplits(t *testing.T) {
	brokers(t, func(t *testing.T, url string, b *broker.Broker) {
		root := uniqueRoot()
		sc := StoreConfig{TopicRoot: root}
		m1 := startMonitor(t, url, sc, root+"-group")
		m2 := startMonitor(t, url, sc, root+"-group")
		peer := peerClient(t, url, root+"-peer")
		defer peer.Disconnect(100)
		const n = 40
		for i := 0; i < n; i++ {
			id := fmt.Sprintf("robot-%02d", i)
			// Not retained: a retained message would outlive the test on a
			// shared broker, and brokers do not send retained messages to
			// shared subscriptions anyway.
			peer.Publish(root+"/"+id+"/health", 1, false, healthMsg(t, id, int64(i+1), "ok")).WaitTimeout(3 * time.Second)
		}
		waitFor(t, 5*time.Second, fmt.Sprintf("%d messages over both monitors", n), func() bool {
			return m1.Store().Counters().Health+m2.Store().Counters().Health >= n
		})
		time.Sleep(200 * time.Millisecond) // a duplicate would arrive in this time
		h1, h2 := m1.Store().Counters().Health, m2.Store().Counters().Health
		if h1+h2 != n {
			t.Fatalf("monitors got %d + %d messages, want %d in total (each exactly once)", h1, h2, n)
		}
		t.Logf("split %d / %d", h1, h2)
	})
}
