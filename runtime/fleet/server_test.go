package fleet

import (
	"bufio"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/transport"
	"github.com/prometheus/client_golang/prometheus/testutil/promlint"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
	"go.uber.org/goleak"
)

// fakeClock is a settable monitor clock.
type fakeClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *fakeClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *fakeClock) Add(d time.Duration) {
	c.mu.Lock()
	c.t = c.t.Add(d)
	c.mu.Unlock()
}

func testServer(t *testing.T, st *Store, clk *fakeClock) (*httptest.Server, chan struct{}) {
	t.Helper()
	closing := make(chan struct{})
	srv := httptest.NewServer(newServer(st, clk.Now, func() bool { return true }, closing))
	t.Cleanup(func() {
		select {
		case <-closing:
		default:
			close(closing)
		}
		srv.Close()
		http.DefaultClient.CloseIdleConnections()
	})
	return srv, closing
}

func getJSON(t *testing.T, url string, v any) {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if resp.StatusCode != 200 || !strings.HasPrefix(resp.Header.Get("Content-Type"), "application/json") {
		t.Fatalf("GET %s: %s %s", url, resp.Status, resp.Header.Get("Content-Type"))
	}
	if err := json.NewDecoder(resp.Body).Decode(v); err != nil {
		t.Fatal(err)
	}
}

func TestAPI(t *testing.T) {
	t.Cleanup(func() { goleak.VerifyNone(t) }) // runs last, after the server is closed
	clk := &fakeClock{t: time.Unix(0, t0)}
	st := NewStore(StoreConfig{})
	srv, _ := testServer(t, st, clk)
	lost := transport.Alert{Code: "messages_lost", Severity: "warning", Sensor: "front_radar", SinceNs: 7}
	mustHandle(t, st, "godwit/b-shuttle/health", healthMsg(t, "b-shuttle", 10, "degraded", lost), false, t0)
	mustHandle(t, st, "godwit/a-robot/status", []byte("offline"), true, t0)

	var vs struct {
		NowNs    int64         `json:"now_ns"`
		Vehicles []VehicleView `json:"vehicles"`
	}
	getJSON(t, srv.URL+"/api/vehicles", &vs)
	if vs.NowNs != t0 || len(vs.Vehicles) != 2 || vs.Vehicles[0].Vehicle != "a-robot" || vs.Vehicles[0].State != StateOffline ||
		vs.Vehicles[1].State != StateDegraded || vs.Vehicles[1].Alerts[0].Code != "messages_lost" ||
		*vs.Vehicles[1].Sensors[0].RateHz != 20 {
		t.Fatalf("vehicles: %+v", vs)
	}
	var one VehicleView
	getJSON(t, srv.URL+"/api/vehicles/b-shuttle", &one)
	if one.Vehicle != "b-shuttle" || one.LastSeenNs != t0 {
		t.Fatalf("one vehicle: %+v", one)
	}
	if resp, err := http.Get(srv.URL + "/api/vehicles/nobody"); err != nil || resp.StatusCode != 404 {
		t.Fatalf("unknown vehicle: %v %v", resp.Status, err)
	} else {
		resp.Body.Close()
	}

	var as struct {
		Events []Event `json:"events"`
	}
	getJSON(t, srv.URL+"/api/alerts?vehicle=b-shuttle", &as)
	if len(as.Events) != 2 || as.Events[0].Kind != EventRaised || as.Events[1].Kind != EventState {
		t.Fatalf("b-shuttle events: %+v", as.Events)
	}
	getJSON(t, srv.URL+"/api/alerts?limit=1", &as)
	if len(as.Events) != 1 || as.Events[0].Vehicle != "a-robot" {
		t.Fatalf("limit=1: %+v", as.Events)
	}
	for _, bad := range []string{"?since=-1", "?limit=x"} {
		resp, err := http.Get(srv.URL + "/api/alerts" + bad)
		if err != nil || resp.StatusCode != 400 {
			t.Fatalf("%s: %v %v, want 400", bad, resp.Status, err)
		}
		resp.Body.Close()
	}
	// The page and its assets are served from the binary, with no
	// reference to any other origin (the machine may have no internet).
	for _, p := range []string{"/", "/assets/app.js", "/assets/style.css"} {
		resp, err := http.Get(srv.URL + p)
		if err != nil || resp.StatusCode != 200 {
			t.Fatalf("GET %s: %v %v", p, resp.Status, err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if strings.Contains(string(b), "http://") || strings.Contains(string(b), "https://") || strings.Contains(string(b), "//cdn") {
			t.Fatalf("%s refers to another origin", p)
		}
	}
}

// Metric names and help follow Prometheus practice as checked by the
// project's own linter (client_golang testutil/promlint), and the text
// exposition parses (prometheus/common expfmt).
func TestMetrics(t *testing.T) {
	t.Cleanup(func() { goleak.VerifyNone(t) }) // runs last, after the server is closed
	clk := &fakeClock{t: time.Unix(0, t0)}
	st := NewStore(StoreConfig{SilentAfter: time.Second})
	srv, _ := testServer(t, st, clk)
	mustHandle(t, st, "godwit/v1/health", healthMsg(t, "v1", 1, "ok"), false, t0)
	mustHandle(t, st, "godwit/v2/health", healthMsg(t, "v2", 1, "failed", transport.Alert{Code: "numeric_reset", Track: 3}), false, t0)
	mustHandle(t, st, "godwit/v3/health", healthMsg(t, "v3", 1, "ok"), false, t0-int64(2*time.Second))
	_ = st.Handle("godwit/v1/health", []byte("{"), false, t0)
	st.Sweep(t0)

	resp, err := http.Get(srv.URL + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	problems, err := promlint.New(strings.NewReader(string(body))).Lint()
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		t.Errorf("promlint: %s: %s", p.Metric, p.Text)
	}
	parser := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := parser.TextToMetricFamilies(strings.NewReader(string(body)))
	if err != nil {
		t.Fatal(err)
	}
	value := func(name, label, lv string) float64 {
		f := fams[name]
		if f == nil {
			t.Fatalf("metric %s missing", name)
		}
		for _, m := range f.GetMetric() {
			for _, l := range m.GetLabel() {
				if l.GetName() == label && l.GetValue() == lv {
					if g := m.GetGauge(); g != nil {
						return g.GetValue()
					}
					return m.GetCounter().GetValue()
				}
			}
		}
		t.Fatalf("%s{%s=%q} missing", name, label, lv)
		return 0
	}
	for _, c := range []struct {
		name, label, lv string
		want            float64
	}{
		{"godwit_fleet_vehicles", "state", "ok", 1},
		{"godwit_fleet_vehicles", "state", "failed", 1},
		{"godwit_fleet_vehicles", "state", "silent", 1},
		{"godwit_fleet_vehicles", "state", "offline", 0},
		{"godwit_fleet_alerts_active", "code", "numeric_reset", 1},
		{"godwit_fleet_messages_total", "kind", "health", 3},
		{"godwit_fleet_messages_rejected_total", "reason", "bad_json", 1},
		{"godwit_fleet_alert_events_total", "event", "raised", 1},
	} {
		if got := value(c.name, c.label, c.lv); got != c.want {
			t.Errorf("%s{%s=%q} = %g, want %g", c.name, c.label, c.lv, got, c.want)
		}
	}
}

// sseReader reads Server-Sent Events (WHATWG HTML §9.2.6, from memory: fields up to a
// blank line; lines starting with ':' are comments).
type sseReader struct{ r *bufio.Reader }

func (s sseReader) next() (kind string, data []byte, err error) {
	for {
		line, err := s.r.ReadString('\n')
		if err != nil {
			return "", nil, err
		}
		line = strings.TrimRight(line, "\n")
		switch {
		case line == "":
			if kind != "" {
				return kind, data, nil
			}
		case strings.HasPrefix(line, "event: "):
			kind = line[len("event: "):]
		case strings.HasPrefix(line, "data: "):
			data = append(data, line[len("data: "):]...)
		}
	}
}

func TestEventStream(t *testing.T) {
	t.Cleanup(func() { goleak.VerifyNone(t) }) // runs last, after the server is closed
	clk := &fakeClock{t: time.Unix(0, t0)}
	st := NewStore(StoreConfig{SilentAfter: time.Second})
	srv, closing := testServer(t, st, clk)
	mustHandle(t, st, "godwit/shuttle-3/health", healthMsg(t, "shuttle-3", 1, "ok"), false, t0)

	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	req, _ := http.NewRequestWithContext(ctx, "GET", srv.URL+"/events", nil)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if ct := resp.Header.Get("Content-Type"); ct != "text/event-stream" {
		t.Fatalf("content type %q, want text/event-stream (WHATWG HTML §9.2)", ct)
	}
	rd := sseReader{bufio.NewReader(resp.Body)}
	kind, data, err := rd.next()
	var snap Snapshot
	if err != nil || kind != "snapshot" || json.Unmarshal(data, &snap) != nil || len(snap.Vehicles) != 1 ||
		snap.Vehicles[0].State != StateOK {
		t.Fatalf("first event %q %s (%v)", kind, data, err)
	}
	clk.Add(2 * time.Second)
	st.Sweep(clk.Now().UnixNano())
	kind, data, err = rd.next()
	var up Snapshot
	if err != nil || kind != "update" || json.Unmarshal(data, &up) != nil || len(up.Vehicles) != 1 ||
		up.Vehicles[0].State != StateSilent || len(up.Events) != 1 || up.Events[0].To != StateSilent {
		t.Fatalf("update %q %s (%v)", kind, data, err)
	}
	if up.NowNs != clk.Now().UnixNano() {
		t.Fatalf("update now_ns %d, want the monitor clock %d", up.NowNs, clk.Now().UnixNano())
	}
	// Shutting the monitor down ends the stream, so a graceful HTTP
	// shutdown does not wait on it.
	close(closing)
	if _, _, err := rd.next(); err == nil {
		t.Fatal("stream still open after closing")
	}
}
