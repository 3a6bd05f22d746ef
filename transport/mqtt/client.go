// Package mqtt is godwit's MQTT client, built on paho.mqtt.golang. It owns
// the connection: reconnecting with capped exponential backoff,
// re-subscribing after every connect, and keeping the retained status topic
// ("online" while connected, "offline" as last will and on Close). Received
// messages go to a Sink (usually a transport.Queue) without blocking.
package mqtt

import (
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"math/rand/v2"
	"net/url"
	"os"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"go.uber.org/zap"
)

// PasswordEnv is the environment variable read for the password when no
// password file is configured.
const PasswordEnv = "GODWIT_MQTT_PASSWORD"

// Options configure a Client. The daemon fills them from configs.Broker
// (url, client_id, qos, username, password_file, tls.ca/cert/key) and
// configs.Output.StatusTopic.
type Options struct {
	// URL of the broker: tcp:// (or mqtt://), ssl:// (or tls://, mqtts://),
	// ws://, wss://. Credentials in the URL are accepted but redacted in logs.
	URL string
	// ClientID identifies the session. Required unless CleanSession.
	ClientID string
	// CleanSession false (the default) asks the broker to keep the session
	// (subscriptions, queued QoS 1/2 messages) across reconnects.
	CleanSession bool
	// QoS for the status messages and the default for Subscribe callers.
	QoS byte
	// Username, and the password from PasswordFile, else from $GODWIT_MQTT_PASSWORD.
	Username     string
	PasswordFile string
	// TLS files (PEM). An empty CAFile means the system roots. CertFile and
	// KeyFile go together (client certificate authentication).
	CAFile, CertFile, KeyFile string
	// StatusTopic gets "online" (retained) once connected; the last will
	// and Close set it to "offline" (retained). "" disables both.
	StatusTopic string
	// Timing. Zero values take the defaults: KeepAlive 10 s, ConnectTimeout
	// 5 s, MinBackoff 100 ms, MaxBackoff 2 s. The cap is kept short so the
	// output resumes within about 2 s of the broker coming back.
	KeepAlive      time.Duration
	ConnectTimeout time.Duration
	MinBackoff     time.Duration
	MaxBackoff     time.Duration
	// OnState is called on every connection change, from one goroutine, in
	// order. It must not block for long.
	OnState func(Event)
	// Logger; nil means no logging.
	Logger *zap.Logger
}

// EventKind is a connection change.
type EventKind int

const (
	Connected     EventKind = iota // connected (and re-subscribed)
	Disconnected                   // an established connection was lost
	ConnectFailed                  // an attempt to connect failed; will retry
)

func (k EventKind) String() string {
	switch k {
	case Connected:
		return "connected"
	case Disconnected:
		return "disconnected"
	case ConnectFailed:
		return "connect_failed"
	}
	return "unknown"
}

// Event reports a connection change.
type Event struct {
	Kind    EventKind
	At      time.Time
	Err     error // why, for Disconnected and ConnectFailed
	Attempt int   // failed attempts in a row before this event
}

// Stats are the connection counters, for health and metrics.
type Stats struct {
	Connected      bool
	Connects       uint64 // successful connects, the first included
	Reconnects     uint64 // successful connects after the first
	Disconnects    uint64 // established connections lost
	ConnectFailure uint64 // failed attempts
	Unrouted       uint64 // messages that matched no subscription
}

// Sink receives messages on paho's delivery goroutine. Push must not block
// and must not keep payload after returning (transport.Queue copies it).
type Sink interface {
	Push(topic string, payload []byte, qos byte, retained bool, arrivalNs int64) bool
}

type subscription struct {
	filter string
	qos    byte
	sink   Sink
}

// Client is a supervised MQTT connection. Its methods are safe for
// concurrent use.
type Client struct {
	opts    Options
	log     *zap.Logger
	logURL  string
	pc      paho.Client
	mu      sync.Mutex
	subs    []subscription
	started bool
	lost    chan error
	done    chan struct{}
	wg      sync.WaitGroup
	closeMu sync.Once

	connected   atomic.Bool
	connUp      chan struct{} // closed and replaced on each connect, under mu
	connects    atomic.Uint64
	disconnects atomic.Uint64
	failures    atomic.Uint64
	unrouted    atomic.Uint64
}

// New checks the options and prepares a client; Start connects.
func New(opts Options) (*Client, error) {
	if opts.KeepAlive <= 0 {
		opts.KeepAlive = 10 * time.Second
	}
	if opts.ConnectTimeout <= 0 {
		opts.ConnectTimeout = 5 * time.Second
	}
	if opts.MinBackoff <= 0 {
		opts.MinBackoff = 100 * time.Millisecond
	}
	if opts.MaxBackoff <= 0 {
		opts.MaxBackoff = 2 * time.Second
	}
	opts.MaxBackoff = max(opts.MaxBackoff, opts.MinBackoff)
	if opts.QoS > 2 {
		return nil, fmt.Errorf("mqtt: qos %d, want 0, 1 or 2", opts.QoS)
	}
	if opts.ClientID == "" && !opts.CleanSession {
		return nil, errors.New("mqtt: a persistent session (clean session off) needs a stable client_id")
	}
	u, err := url.Parse(opts.URL)
	if err != nil {
		return nil, fmt.Errorf("mqtt: broker url: %w", err)
	}
	secure := false
	switch u.Scheme {
	case "tcp", "mqtt", "ws":
	case "ssl", "tls", "mqtts", "wss":
		secure = true
	default:
		return nil, fmt.Errorf("mqtt: broker url %s: scheme %q, want tcp, ssl, ws or wss", u.Redacted(), u.Scheme)
	}
	if u.Host == "" {
		return nil, fmt.Errorf("mqtt: broker url %s has no host", u.Redacted())
	}
	c := &Client{
		opts:   opts,
		log:    opts.Logger,
		logURL: u.Redacted(),
		lost:   make(chan error, 1),
		done:   make(chan struct{}),
		connUp: make(chan struct{}),
	}
	if c.log == nil {
		c.log = zap.NewNop()
	}

	po := paho.NewClientOptions().
		AddBroker(opts.URL).
		SetClientID(opts.ClientID).
		SetCleanSession(opts.CleanSession).
		SetKeepAlive(opts.KeepAlive).
		SetPingTimeout(opts.KeepAlive/2 + time.Second).
		SetConnectTimeout(opts.ConnectTimeout).
		SetWriteTimeout(opts.ConnectTimeout).
		SetOrderMatters(true). // handlers run in arrival order on one goroutine
		SetAutoReconnect(false).
		SetConnectRetry(false).
		SetResumeSubs(false). // we re-subscribe ourselves on every connect
		SetDefaultPublishHandler(func(paho.Client, paho.Message) { c.unrouted.Add(1) }).
		SetConnectionLostHandler(func(_ paho.Client, err error) {
			select {
			case c.lost <- err:
			default:
			}
		})
	if bufferedScheme(u.Scheme) {
		po.SetCustomOpenConnectionFn(openBuffered)
	}
	if opts.Username != "" {
		po.SetUsername(opts.Username)
	}
	if pw, ok, err := readPassword(opts.PasswordFile); err != nil {
		return nil, err
	} else if ok {
		po.SetPassword(pw)
	}
	if opts.StatusTopic != "" {
		po.SetWill(opts.StatusTopic, "offline", opts.QoS, true)
	}
	if secure || opts.CAFile != "" || opts.CertFile != "" {
		tc, err := tlsConfig(opts.CAFile, opts.CertFile, opts.KeyFile)
		if err != nil {
			return nil, err
		}
		po.SetTLSConfig(tc)
	}
	c.pc = paho.NewClient(po)
	return c, nil
}

// readPassword reads the password file (a trailing line break is not part
// of the password), else the environment. The value is never logged.
func readPassword(path string) (string, bool, error) {
	if path != "" {
		b, err := os.ReadFile(path)
		if err != nil {
			return "", false, fmt.Errorf("mqtt: password file: %w", err)
		}
		return strings.TrimRight(string(b), "\r\n"), true, nil
	}
	if pw, ok := os.LookupEnv(PasswordEnv); ok {
		return pw, true, nil
	}
	return "", false, nil
}

func tlsConfig(caFile, certFile, keyFile string) (*tls.Config, error) {
	tc := &tls.Config{MinVersion: tls.VersionTLS12}
	if caFile != "" {
		pem, err := os.ReadFile(caFile)
		if err != nil {
			return nil, fmt.Errorf("mqtt: tls ca: %w", err)
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("mqtt: tls ca %s holds no PEM certificate", caFile)
		}
		tc.RootCAs = pool
	}
	if (certFile == "") != (keyFile == "") {
		return nil, errors.New("mqtt: tls cert and key go together: set both or neither")
	}
	if certFile != "" {
		cert, err := tls.LoadX509KeyPair(certFile, keyFile)
		if err != nil {
			return nil, fmt.Errorf("mqtt: tls client certificate: %w", err)
		}
		tc.Certificates = []tls.Certificate{cert}
	}
	return tc, nil
}

// Subscribe adds a subscription whose messages go to sink. It is made now
// when connected and again after every reconnect.
func (c *Client) Subscribe(filter string, qos byte, sink Sink) error {
	if qos > 2 {
		return fmt.Errorf("mqtt: qos %d, want 0, 1 or 2", qos)
	}
	s := subscription{filter: filter, qos: qos, sink: sink}
	c.mu.Lock()
	c.subs = append(c.subs, s)
	c.mu.Unlock()
	if c.connected.Load() {
		return c.subscribe(s)
	}
	return nil
}

func (c *Client) subscribe(s subscription) error {
	tok := c.pc.Subscribe(s.filter, s.qos, deliver(s.sink))
	if err := c.wait(tok); err != nil {
		return fmt.Errorf("mqtt: subscribe %s: %w", s.filter, err)
	}
	if st, ok := tok.(*paho.SubscribeToken); ok {
		for _, code := range st.Result() {
			if code == 0x80 { // SUBACK failure (MQTT 3.1.1 §3.9.3)
				return fmt.Errorf("mqtt: broker refused subscription %s", s.filter)
			}
		}
	}
	return nil
}

// deliver is the paho message handler: stamp the arrival time and hand the
// message to the sink. It adds no allocation of its own.
func deliver(sink Sink) paho.MessageHandler {
	return func(_ paho.Client, m paho.Message) {
		sink.Push(m.Topic(), m.Payload(), m.Qos(), m.Retained(), time.Now().UnixNano())
	}
}

func (c *Client) wait(tok paho.Token) error {
	select {
	case <-tok.Done():
		return tok.Error()
	case <-time.After(c.opts.ConnectTimeout):
		return errors.New("timed out")
	case <-c.done:
		return errors.New("client closed")
	}
}

// Start begins connecting in the background and returns at once.
func (c *Client) Start() {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.started {
		return
	}
	c.started = true
	c.wg.Add(1)
	go c.supervise()
}

// WaitConnected blocks until the client is connected, the timeout passes
// or the client is closed.
func (c *Client) WaitConnected(timeout time.Duration) bool {
	c.mu.Lock()
	up := c.connUp
	c.mu.Unlock()
	if c.connected.Load() {
		return true
	}
	select {
	case <-up:
		return true
	case <-time.After(timeout):
		return c.connected.Load()
	case <-c.done:
		return false
	}
}

// supervise connects, waits for the connection to drop, backs off, and
// connects again until Close.
func (c *Client) supervise() {
	defer c.wg.Done()
	failed := 0
	for {
		select {
		case <-c.lost: // a stale signal from an earlier connection
		default:
		}
		err := c.connect()
		if err == nil {
			failed = 0
			select {
			case <-c.done:
				return
			case err = <-c.lost:
			}
			c.connected.Store(false)
			c.disconnects.Add(1)
			c.log.Warn("mqtt connection lost", zap.String("broker", c.logURL), zap.Error(err))
			c.emit(Event{Kind: Disconnected, Err: err})
		} else {
			if c.closed() {
				return
			}
			c.failures.Add(1)
			c.log.Warn("mqtt connect failed", zap.String("broker", c.logURL), zap.Int("attempt", failed+1), zap.Error(err))
			c.emit(Event{Kind: ConnectFailed, Err: err, Attempt: failed})
			failed++
		}
		t := time.NewTimer(Backoff(failed, c.opts.MinBackoff, c.opts.MaxBackoff, rand.Float64()))
		select {
		case <-c.done:
			t.Stop()
			return
		case <-t.C:
		}
	}
}

// connect makes one connection attempt, then re-subscribes and announces
// "online". A failure after the CONNACK drops the connection again.
func (c *Client) connect() error {
	if err := c.wait(c.pc.Connect()); err != nil {
		c.pc.Disconnect(0)
		return err
	}
	c.mu.Lock()
	subs := append([]subscription(nil), c.subs...)
	c.mu.Unlock()
	for _, s := range subs {
		if err := c.subscribe(s); err != nil {
			c.pc.Disconnect(0)
			return err
		}
	}
	if c.opts.StatusTopic != "" {
		if err := c.wait(c.pc.Publish(c.opts.StatusTopic, c.opts.QoS, true, "online")); err != nil {
			c.pc.Disconnect(0)
			return fmt.Errorf("mqtt: publish online status: %w", err)
		}
	}
	c.connected.Store(true)
	c.connects.Add(1)
	c.mu.Lock()
	close(c.connUp)
	c.connUp = make(chan struct{})
	c.mu.Unlock()
	c.log.Info("mqtt connected", zap.String("broker", c.logURL), zap.Int("subscriptions", len(subs)))
	c.emit(Event{Kind: Connected})
	return nil
}

func (c *Client) emit(e Event) {
	e.At = time.Now()
	if c.opts.OnState != nil {
		c.opts.OnState(e)
	}
}

func (c *Client) closed() bool {
	select {
	case <-c.done:
		return true
	default:
		return false
	}
}

// Backoff is the wait before reconnect attempt n+1 after n failures in a
// row: min·2ⁿ capped at max, shortened by up to 20 % by jitter u ∈ [0,1) so
// a fleet does not reconnect in lock-step (capped exponential backoff with
// jitter, common practice).
func Backoff(n int, min, max time.Duration, u float64) time.Duration {
	d := min
	for i := 0; i < n && d < max; i++ {
		d *= 2
	}
	d = time.Duration(float64(d) * (1 - 0.2*u))
	if d > max {
		d = max
	}
	return d
}

// Publish sends a message and waits for it to be handed to the broker (QoS 0)
// or acknowledged (QoS 1/2), at most the connect timeout. paho keeps a
// reference to payload while the message is in flight: after a nil return
// the buffer may be reused; after a timeout it must not be written again.
func (c *Client) Publish(topic string, payload []byte, qos byte, retain bool) error {
	if !c.connected.Load() {
		return errNotConnected
	}
	return c.wait(c.pc.Publish(topic, qos, retain, payload))
}

// Pending is a publish handed to the MQTT library and not yet known to be
// complete. The zero Pending is complete with no error.
type Pending struct {
	tok paho.Token
}

// Done reports, without waiting, whether the publish has completed
// (written for QoS 0, acknowledged for QoS 1/2, or failed).
func (p Pending) Done() bool {
	if p.tok == nil {
		return true
	}
	select {
	case <-p.tok.Done():
		return true
	default:
		return false
	}
}

// Err is the publish's outcome once Done reports true; nil before.
func (p Pending) Err() error {
	if !p.Done() {
		return nil
	}
	if p.tok == nil {
		return nil
	}
	return p.tok.Error()
}

// PublishAsync hands a message to the MQTT library and returns at once; the
// error is only for a message that could not be handed over (not
// connected). paho keeps the payload slice until the publish completes, so
// the caller must not write into payload until Wait has returned nil, and
// never again after Wait returned an error (a timed-out message may still
// be sent, or resent from the session store). Messages published from one
// goroutine go out in the order of the calls.
func (c *Client) PublishAsync(topic string, payload []byte, qos byte, retain bool) (Pending, error) {
	if !c.connected.Load() {
		return Pending{}, errNotConnected
	}
	return Pending{tok: c.pc.Publish(topic, qos, retain, payload)}, nil
}

// Wait blocks until p completes, at most the connect timeout (or until the
// client is closed), and returns its error.
func (c *Client) Wait(p Pending) error {
	if p.tok == nil {
		return nil
	}
	return c.wait(p.tok)
}

var errNotConnected = errors.New("mqtt: not connected")

// Connected reports whether the client is connected now.
func (c *Client) Connected() bool { return c.connected.Load() }

// Stats returns the connection counters.
func (c *Client) Stats() Stats {
	n := c.connects.Load()
	return Stats{
		Connected:      c.connected.Load(),
		Connects:       n,
		Reconnects:     max(n, 1) - 1,
		Disconnects:    c.disconnects.Load(),
		ConnectFailure: c.failures.Load(),
		Unrouted:       c.unrouted.Load(),
	}
}

// Close announces "offline" (retained) when connected, disconnects cleanly
// and stops the supervisor. It waits for the client's goroutines.
func (c *Client) Close() {
	c.closeMu.Do(func() {
		close(c.done)
		c.wg.Wait()
		if c.pc.IsConnectionOpen() && c.opts.StatusTopic != "" {
			tok := c.pc.Publish(c.opts.StatusTopic, c.opts.QoS, true, "offline")
			select {
			case <-tok.Done():
			case <-time.After(time.Second):
			}
		}
		c.connected.Store(false)
		c.pc.Disconnect(250)
	})
}
