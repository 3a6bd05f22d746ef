// Package fleet is godwit's fleet health monitor: it subscribes to every
// vehicle's health and status topics, keeps each vehicle's latest state and
// an alert history, notices vehicles that fall silent, and serves a web
// page (live over Server-Sent Events), a JSON API and Prometheus metrics.
//
// The Store is the deterministic part (messages and "now" in, views out);
// the Monitor owns the clock, the MQTT connection and the HTTP server.
package fleet

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"os"
	"strings"
	"sync"
	"time"

	"github.com/godwit-fusion/godwit/transport/mqtt"
	"go.uber.org/zap"
)

// DefaultListen is where the page is served unless told otherwise: loopback,
// because the page has no authentication of its own.
const DefaultListen = "127.0.0.1:8080"

// Options configure a Monitor.
type Options struct {
	// Broker URL (tcp://, ssl://, ws://, wss://) and credentials, as for
	// the daemon. ClientID "" picks a unique one.
	BrokerURL, ClientID, Username, PasswordFile string
	CAFile, CertFile, KeyFile                   string
	// Share, when set, subscribes as a member of this MQTT shared
	// subscription group, so several monitors split the messages.
	Share string
	// Listen is the HTTP address; "" means DefaultListen. Port 0 picks one.
	Listen string
	Store  StoreConfig
	// Clock is the monitor's time; nil means time.Now (tests inject one).
	Clock func() time.Time
	// MQTT, when set, adjusts the client options (tests shorten backoff).
	MQTT   func(*mqtt.Options)
	Logger *zap.Logger
}

// Monitor is a running fleet monitor.
type Monitor struct {
	opts    Options
	st      *Store
	client  *mqtt.Client
	ln      net.Listener
	srv     *server
	closing chan struct{}
	log     *zap.Logger
	lim     logLimiter
	runOnce sync.Once
}

// New checks the options, makes the store and the MQTT client, and binds
// the HTTP listener (so a taken port is reported here, before any
// connection). Run must follow, and owns the listener from then on.
func New(opts Options) (*Monitor, error) {
	if opts.BrokerURL == "" {
		return nil, errors.New("fleet: a broker URL is required")
	}
	if opts.Listen == "" {
		opts.Listen = DefaultListen
	}
	if opts.Clock == nil {
		opts.Clock = time.Now
	}
	if opts.Logger == nil {
		opts.Logger = zap.NewNop()
	}
	if opts.ClientID == "" {
		host, _ := os.Hostname()
		opts.ClientID = fmt.Sprintf("godwit-fleet-%s-%d-%d", host, os.Getpid(), time.Now().UnixNano()%1e9)
	}
	if err := validGroup(opts.Share); err != nil {
		return nil, err
	}
	if strings.ContainsAny(opts.Store.TopicRoot, "+#") {
		return nil, fmt.Errorf("fleet: topic root %q must not contain wildcards", opts.Store.TopicRoot)
	}
	m := &Monitor{opts: opts, st: NewStore(opts.Store), closing: make(chan struct{}), log: opts.Logger}
	mo := mqtt.Options{URL: opts.BrokerURL, ClientID: opts.ClientID, CleanSession: true, QoS: 1,
		Username: opts.Username, PasswordFile: opts.PasswordFile,
		CAFile: opts.CAFile, CertFile: opts.CertFile, KeyFile: opts.KeyFile,
		Logger: opts.Logger,
		OnState: func(e mqtt.Event) {
			if e.Kind == mqtt.Connected {
				m.log.Info("connected to the broker", zap.Strings("filters", m.st.Filters(opts.Share)))
			} else {
				m.log.Warn("broker connection", zap.Stringer("event", e.Kind), zap.Error(e.Err))
			}
		}}
	if opts.MQTT != nil {
		opts.MQTT(&mo)
	}
	c, err := mqtt.New(mo)
	if err != nil {
		return nil, fmt.Errorf("fleet: %w", err)
	}
	for _, f := range m.st.Filters(opts.Share) {
		if err := c.Subscribe(f, 1, sink{m}); err != nil {
			return nil, fmt.Errorf("fleet: %w", err)
		}
	}
	ln, err := net.Listen("tcp", opts.Listen)
	if err != nil {
		return nil, fmt.Errorf("fleet: listen: %w", err)
	}
	m.client, m.ln = c, ln
	m.srv = newServer(m.st, opts.Clock, c.Connected, m.closing)
	return m, nil
}

// validGroup checks a shared subscription group name: one topic level
// without wildcards (MQTT 5.0 §4.8.2, ShareName).
func validGroup(g string) error {
	for _, r := range g {
		if r == '/' || r == '+' || r == '#' {
			return fmt.Errorf("fleet: share group %q must not contain '/', '+' or '#'", g)
		}
	}
	return nil
}

// Store is the monitor's state.
func (m *Monitor) Store() *Store { return m.st }

// Addr is the bound HTTP address (host:port).
func (m *Monitor) Addr() string { return m.ln.Addr().String() }

// URL is the page's address, e.g. http://127.0.0.1:8080/.
func (m *Monitor) URL() string { return "http://" + m.Addr() + "/" }

// Connected reports whether the monitor is connected (and subscribed).
func (m *Monitor) Connected() bool { return m.client.Connected() }

// Handler is the HTTP handler (page, /events, /api/…, /metrics).
func (m *Monitor) Handler() http.Handler { return m.srv }

// Run connects, serves and sweeps for silent vehicles until ctx ends, then
// stops gracefully: event streams end, the HTTP server drains, the MQTT
// client disconnects. It returns an error only when serving failed.
func (m *Monitor) Run(ctx context.Context) error {
	err := errors.New("fleet: Run called twice")
	m.runOnce.Do(func() { err = m.run(ctx) })
	return err
}

func (m *Monitor) run(ctx context.Context) error {
	m.client.Start()
	hs := &http.Server{Handler: m.srv, ReadHeaderTimeout: 5 * time.Second,
		ErrorLog: zap.NewStdLog(m.log.Named("http"))}
	served := make(chan error, 1)
	go func() { served <- hs.Serve(m.ln) }()
	m.log.Info("fleet monitor serving", zap.String("url", m.URL()))

	period := min(max(m.st.cfg.SilentAfter/10, 50*time.Millisecond), time.Second)
	tick := time.NewTicker(period)
	defer tick.Stop()
	var err error
loop:
	for {
		select {
		case <-ctx.Done():
			break loop
		case e := <-served:
			err = fmt.Errorf("fleet: http: %w", e)
			break loop
		case <-tick.C:
			m.st.Sweep(m.opts.Clock().UnixNano())
		}
	}
	close(m.closing) // event streams return, so Shutdown can finish
	sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	if e := hs.Shutdown(sctx); e != nil && err == nil {
		err = fmt.Errorf("fleet: http shutdown: %w", e)
		_ = hs.Close()
	}
	if err == nil {
		if e := <-served; e != nil && !errors.Is(e, http.ErrServerClosed) {
			err = fmt.Errorf("fleet: http: %w", e)
		}
	}
	m.client.Close()
	return err
}

// sink hands received messages to the store on paho's delivery goroutine.
// Decoding one health message takes microseconds, so it is done right
// there instead of through a queue; the store copies what it keeps.
type sink struct{ m *Monitor }

func (s sink) Push(topic string, payload []byte, _ byte, retained bool, _ int64) bool {
	m := s.m
	if err := m.st.Handle(topic, payload, retained, m.opts.Clock().UnixNano()); err != nil {
		var re *RejectError
		if errors.As(err, &re) {
			if n, ok := m.lim.allow(re.Reason, m.opts.Clock()); ok {
				m.log.Warn("message refused", zap.Error(err), zap.Uint64("suppressed_since_last", n))
			}
		}
	}
	return true
}

// logLimiter lets one log line per reason through every 10 s, and says how
// many it held back.
type logLimiter struct {
	mu   sync.Mutex
	last map[string]time.Time
	held map[string]uint64
}

func (l *logLimiter) allow(key string, now time.Time) (uint64, bool) {
	l.mu.Lock()
	defer l.mu.Unlock()
	if l.last == nil {
		l.last, l.held = map[string]time.Time{}, map[string]uint64{}
	}
	if t, ok := l.last[key]; ok && now.Sub(t) < 10*time.Second {
		l.held[key]++
		return 0, false
	}
	n := l.held[key]
	l.last[key], l.held[key] = now, 0
	return n, true
}
