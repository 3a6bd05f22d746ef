package fleet

import (
	"embed"
	"encoding/json"
	"io/fs"
	"net/http"
	"strconv"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
)

//go:embed web
var webFS embed.FS

// SSE pacing: changes are coalesced for at least sseMinGap so a fleet of
// many vehicles reporting at 1 Hz costs a browser a few frames a second,
// and a comment line every ssePing keeps idle proxies from closing the
// stream (common practice for Server-Sent Events).
const (
	sseMinGap = 100 * time.Millisecond
	ssePing   = 15 * time.Second
)

// server is the HTTP side: the page, the event stream, the JSON API and
// the metrics.
type server struct {
	st      *Store
	now     func() time.Time
	ready   func() bool
	closing <-chan struct{} // closed when the monitor stops: streams end
	mux     *http.ServeMux
}

func newServer(st *Store, now func() time.Time, ready func() bool, closing <-chan struct{}) *server {
	s := &server{st: st, now: now, ready: ready, closing: closing, mux: http.NewServeMux()}
	reg := prometheus.NewRegistry()
	reg.MustRegister(newCollector(st, ready))
	sub, err := fs.Sub(webFS, "web")
	if err != nil {
		panic(err) // the embedded tree is fixed at build time
	}
	s.mux.Handle("GET /{$}", http.HandlerFunc(s.page))
	s.mux.Handle("GET /assets/", http.StripPrefix("/assets/", http.FileServerFS(sub)))
	s.mux.HandleFunc("GET /events", s.events)
	s.mux.HandleFunc("GET /api/vehicles", s.vehicles)
	s.mux.HandleFunc("GET /api/vehicles/{id}", s.vehicle)
	s.mux.HandleFunc("GET /api/alerts", s.alerts)
	s.mux.Handle("GET /metrics", promhttp.HandlerFor(reg, promhttp.HandlerOpts{}))
	s.mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, _ *http.Request) { _, _ = w.Write([]byte("ok\n")) })
	s.mux.HandleFunc("GET /readyz", func(w http.ResponseWriter, _ *http.Request) {
		if !s.ready() {
			http.Error(w, "not connected to the broker", http.StatusServiceUnavailable)
			return
		}
		_, _ = w.Write([]byte("ok\n"))
	})
	return s
}

func (s *server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	h := w.Header()
	// The page loads only its own assets; nothing from elsewhere may run.
	h.Set("Content-Security-Policy", "default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'")
	h.Set("X-Content-Type-Options", "nosniff")
	s.mux.ServeHTTP(w, r)
}

func (s *server) page(w http.ResponseWriter, r *http.Request) {
	b, err := webFS.ReadFile("web/index.html")
	if err != nil {
		http.Error(w, err.Error(), http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.Header().Set("Cache-Control", "no-cache")
	_, _ = w.Write(b)
}

func writeJSON(w http.ResponseWriter, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	enc := json.NewEncoder(w)
	enc.SetIndent("", " ")
	_ = enc.Encode(v)
}

func (s *server) vehicles(w http.ResponseWriter, r *http.Request) {
	snap := s.st.Changes(0, s.now().UnixNano())
	writeJSON(w, struct {
		NowNs    int64         `json:"now_ns"`
		Vehicles []VehicleView `json:"vehicles"`
	}{snap.NowNs, snap.Vehicles})
}

func (s *server) vehicle(w http.ResponseWriter, r *http.Request) {
	v, ok := s.st.Vehicle(r.PathValue("id"))
	if !ok {
		http.Error(w, "no such vehicle", http.StatusNotFound)
		return
	}
	writeJSON(w, v)
}

// alerts serves the alert history, oldest first. ?vehicle= filters by
// vehicle, ?since= (an event seq) returns only newer events, ?limit= keeps
// the newest N.
func (s *server) alerts(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	var since uint64
	if v := q.Get("since"); v != "" {
		n, err := strconv.ParseUint(v, 10, 64)
		if err != nil {
			http.Error(w, "since: want an event seq (non-negative integer)", http.StatusBadRequest)
			return
		}
		since = n
	}
	limit := -1
	if v := q.Get("limit"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 0 {
			http.Error(w, "limit: want a non-negative integer", http.StatusBadRequest)
			return
		}
		limit = n
	}
	snap := s.st.Changes(since, s.now().UnixNano())
	evs := snap.Events
	if id := q.Get("vehicle"); id != "" {
		kept := evs[:0]
		for _, e := range evs {
			if e.Vehicle == id {
				kept = append(kept, e)
			}
		}
		evs = kept
	}
	if limit >= 0 && len(evs) > limit {
		evs = evs[len(evs)-limit:]
	}
	writeJSON(w, struct {
		NowNs  int64   `json:"now_ns"`
		Events []Event `json:"events"`
	}{snap.NowNs, evs})
}

// events is the Server-Sent Events stream (WHATWG HTML Living Standard,
// §9.2): one "snapshot" event with everything, then "update" events with
// the vehicles changed and the history appended since the last one.
func (s *server) events(w http.ResponseWriter, r *http.Request) {
	fl, ok := w.(http.Flusher)
	if !ok {
		http.Error(w, "streaming unsupported", http.StatusInternalServerError)
		return
	}
	wake, stop := s.st.Watch()
	defer stop()
	h := w.Header()
	h.Set("Content-Type", "text/event-stream")
	h.Set("Cache-Control", "no-store")
	h.Set("X-Accel-Buffering", "no") // keep reverse proxies from buffering the stream
	rc := http.NewResponseController(w)
	send := func(kind string, snap Snapshot) bool {
		b, err := json.Marshal(snap)
		if err != nil {
			return false
		}
		_ = rc.SetWriteDeadline(time.Now().Add(10 * time.Second)) // a stuck client must not pin us
		_, err = w.Write([]byte("id: " + strconv.FormatUint(snap.Version, 10) + "\nevent: " + kind + "\ndata: "))
		if err == nil {
			_, err = w.Write(b)
		}
		if err == nil {
			_, err = w.Write([]byte("\n\n"))
		}
		if err != nil {
			return false
		}
		fl.Flush()
		return true
	}
	if _, err := w.Write([]byte("retry: 2000\n\n")); err != nil {
		return
	}
	snap := s.st.Changes(0, s.now().UnixNano())
	if !send("snapshot", snap) {
		return
	}
	ver := snap.Version
	ping := time.NewTicker(ssePing)
	defer ping.Stop()
	gap := time.NewTimer(0)
	defer gap.Stop()
	for {
		select {
		case <-r.Context().Done():
			return
		case <-s.closing:
			return
		case <-ping.C:
			_ = rc.SetWriteDeadline(time.Now().Add(10 * time.Second))
			if _, err := w.Write([]byte(": ping\n\n")); err != nil {
				return
			}
			fl.Flush()
		case <-wake:
			select { // coalesce: at most one update per sseMinGap
			case <-gap.C:
			case <-r.Context().Done():
				return
			case <-s.closing:
				return
			}
			snap := s.st.Changes(ver, s.now().UnixNano())
			if snap.Version != ver {
				if !send("update", snap) {
					return
				}
				ver = snap.Version
			}
			gap.Reset(sseMinGap)
		}
	}
}
