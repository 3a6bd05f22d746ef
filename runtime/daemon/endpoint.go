package daemon

import (
	"context"
	"errors"
	"io"
	"net"
	"net/http"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
	"go.uber.org/zap"
)

// endpoint is the HTTP listener on metrics.listen: /metrics (Prometheus
// text exposition), /healthz (the process is alive) and /readyz (connected
// to the broker with every subscription made).
type endpoint struct {
	srv  *http.Server
	ln   net.Listener
	done chan struct{}
}

// startEndpoint listens on addr and serves in a goroutine until shutdown.
func startEndpoint(addr string, d *Daemon) (*endpoint, error) {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, err
	}
	mux := http.NewServeMux()
	mux.Handle("GET /metrics", promhttp.HandlerFor(d.metrics.reg, promhttp.HandlerOpts{
		// A failing collector must not hide the others.
		ErrorHandling: promhttp.ContinueOnError,
		Registry:      d.metrics.reg, // counts its own errors
	}))
	mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, _ *http.Request) {
		w.Header().Set("Content-Type", "text/plain; charset=utf-8")
		_, _ = io.WriteString(w, "ok\n")
	})
	mux.HandleFunc("GET /readyz", func(w http.ResponseWriter, _ *http.Request) {
		w.Header().Set("Content-Type", "text/plain; charset=utf-8")
		if why := d.notReady(); why != "" {
			w.WriteHeader(http.StatusServiceUnavailable)
			_, _ = io.WriteString(w, why+"\n")
			return
		}
		_, _ = io.WriteString(w, "ready\n")
	})
	e := &endpoint{
		srv: &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second,
			ErrorLog: zap.NewStdLog(d.log.Named("http"))},
		ln:   ln,
		done: make(chan struct{}),
	}
	go func() {
		defer close(e.done)
		if err := e.srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			d.log.Error("metrics endpoint stopped", zap.Error(err))
		}
	}()
	return e, nil
}

// shutdown lets running requests finish (a scrape takes milliseconds),
// closes idle connections and waits for the server goroutine.
func (e *endpoint) shutdown() {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	if err := e.srv.Shutdown(ctx); err != nil {
		_ = e.srv.Close()
	}
	<-e.done
}

// notReady is "" when the daemon can do its work, else why not.
func (d *Daemon) notReady() string {
	if d.stopping.Load() {
		return "stopping"
	}
	c := d.liveClient.Load()
	if c == nil {
		return "starting"
	}
	// The client reports connected only after every subscription is
	// acknowledged (and "online" is published), so this is "subscribed".
	if !c.Connected() {
		return "not connected to the broker"
	}
	return ""
}

// Registry is the daemon's Prometheus registry, for embedding programs that
// serve metrics their own way.
func (d *Daemon) Registry() *prometheus.Registry { return d.metrics.reg }

// MetricsAddr is the address the metrics endpoint listens on ("" while it
// is not listening: before Run, after it, with metrics.listen "", or when
// the address could not be bound).
func (d *Daemon) MetricsAddr() string {
	if a := d.metricsAddr.Load(); a != nil {
		return *a
	}
	return ""
}
