// Package broker runs an embedded MQTT broker (mochi-mqtt v2) on loopback for
// tests and the demo. It is not meant to carry a vehicle's traffic: use a
// real broker (e.g. Mosquitto) there.
package broker

import (
	"crypto/tls"
	"errors"
	"io"
	"log/slog"
	"net"
	"sync"

	mochi "github.com/mochi-mqtt/server/v2"
	"github.com/mochi-mqtt/server/v2/hooks/auth"
	"github.com/mochi-mqtt/server/v2/listeners"
	"github.com/mochi-mqtt/server/v2/packets"
)

// Config says where the broker listens.
type Config struct {
	// Addr is the TCP listen address; "" means 127.0.0.1:0 (a free port).
	// Pass the Addr of a closed broker to bring it back on the same address.
	Addr string
	// TLS, when set, makes the TCP listener speak TLS (client URL ssl://).
	TLS *tls.Config
	// WSAddr, when set, adds a WebSocket listener (client URL ws://, or
	// wss:// with TLS). "127.0.0.1:0" picks a free port.
	WSAddr string
	// Logger receives the broker's own log; nil discards it.
	Logger *slog.Logger
	// Authenticate, when set, decides on each CONNECT; nil lets everyone in.
	Authenticate func(clientID, username string, password []byte) bool
}

// authHook admits clients by Config.Authenticate and allows every topic.
type authHook struct {
	mochi.HookBase
	check func(clientID, username string, password []byte) bool
}

func (h *authHook) ID() string { return "godwit-auth" }

func (h *authHook) Provides(b byte) bool {
	return b == mochi.OnConnectAuthenticate || b == mochi.OnACLCheck
}

func (h *authHook) OnConnectAuthenticate(cl *mochi.Client, pk packets.Packet) bool {
	return h.check(pk.Connect.ClientIdentifier, string(pk.Connect.Username), pk.Connect.Password)
}

func (h *authHook) OnACLCheck(*mochi.Client, string, bool) bool { return true }

// Broker is a running embedded broker.
type Broker struct {
	srv   *mochi.Server
	addr  string
	url   string
	wsURL string
	// listenerIDs are the ids of the listeners added, for Close.
	listenerIDs []string
	closed      sync.Once
}

// Start starts a broker and returns once it accepts connections. Every
// client may connect and use every topic.
func Start(cfg Config) (*Broker, error) {
	if cfg.Addr == "" {
		cfg.Addr = "127.0.0.1:0"
	}
	log := cfg.Logger
	if log == nil {
		log = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	srv := mochi.New(&mochi.Options{Logger: log, InlineClient: true})
	var hook mochi.Hook = new(auth.AllowHook)
	if cfg.Authenticate != nil {
		hook = &authHook{check: cfg.Authenticate}
	}
	if err := srv.AddHook(hook, nil); err != nil {
		return nil, err
	}
	tcp := listeners.NewTCP(listeners.Config{ID: "tcp", Address: cfg.Addr, TLSConfig: cfg.TLS})
	if err := srv.AddListener(tcp); err != nil {
		srv.Close()
		return nil, err
	}
	b := &Broker{srv: srv, addr: tcp.Address(), listenerIDs: []string{tcp.ID()}}
	scheme := "tcp://"
	if cfg.TLS != nil {
		scheme = "ssl://"
	}
	b.url = scheme + b.addr
	if cfg.WSAddr != "" {
		wsAddr, err := resolvePort(cfg.WSAddr)
		if err != nil {
			srv.Close()
			return nil, err
		}
		ws := listeners.NewWebsocket(listeners.Config{ID: "ws", Address: wsAddr, TLSConfig: cfg.TLS})
		if err := srv.AddListener(ws); err != nil {
			srv.Close()
			return nil, err
		}
		b.listenerIDs = append(b.listenerIDs, ws.ID())
		scheme = "ws://"
		if cfg.TLS != nil {
			scheme = "wss://"
		}
		b.wsURL = scheme + wsAddr
	}
	if err := srv.Serve(); err != nil {
		srv.Close()
		return nil, err
	}
	return b, nil
}

// resolvePort turns host:0 into host:N with N free now. mochi's WebSocket
// listener binds in its serving goroutine, so it cannot report the port it
// got; a free port is picked here instead (a small race, fine for tests).
func resolvePort(addr string) (string, error) {
	host, port, err := net.SplitHostPort(addr)
	if err != nil {
		return "", err
	}
	if port != "0" {
		return addr, nil
	}
	l, err := net.Listen("tcp", net.JoinHostPort(host, "0"))
	if err != nil {
		return "", err
	}
	a := l.Addr().String()
	if err := l.Close(); err != nil {
		return "", err
	}
	return a, nil
}

// URL is the client URL of the TCP listener, e.g. tcp://127.0.0.1:40123.
func (b *Broker) URL() string { return b.url }

// WSURL is the client URL of the WebSocket listener, or "".
func (b *Broker) WSURL() string { return b.wsURL }

// Addr is the bound TCP address (host:port).
func (b *Broker) Addr() string { return b.addr }

// Publish sends a message from the broker itself (retained messages too).
func (b *Broker) Publish(topic string, payload []byte, retain bool, qos byte) error {
	return b.srv.Publish(topic, payload, retain, qos)
}

// Kick drops the connection of the client with this id without a clean
// DISCONNECT from the client, so its last will is published. It reports
// whether the client was connected. Tests use it to inject faults.
func (b *Broker) Kick(clientID string) bool {
	cl, ok := b.srv.Clients.Get(clientID)
	if !ok || cl.Closed() {
		return false
	}
	cl.Stop(errors.New("kicked"))
	return true
}

// ErrClosed is returned by Close after the first call.
var ErrClosed = errors.New("broker: already closed")

// Close disconnects every client, stops the listeners and waits for the
// broker's goroutines to finish.
func (b *Broker) Close() error {
	err := ErrClosed
	b.closed.Do(func() {
		// mochi v2.7.9's own shutdown lists a listener's clients under a
		// nested read lock (Clients.GetByListener calls Len while holding
		// RLock). A client leaving at that moment queues a writer between
		// the two read locks, and Go's RWMutex then blocks both for good:
		// seen in CI as a Server.Close hung for 30 min. So the listeners
		// and their clients are stopped here first, under one read lock at
		// a time, and taken out of the map, leaving Server.Close none. The
		// listeners stop accepting first, so that no client arrives after
		// the others were sent away (mochi's order is the other way round).
		for _, id := range b.listenerIDs {
			b.srv.Listeners.Close(id, func(string) {})
		}
		b.disconnectAll()
		for _, id := range b.listenerIDs {
			b.srv.Listeners.Delete(id)
		}
		err = b.srv.Close()
	})
	return err
}

// disconnectAll sends a server-shutting-down DISCONNECT to every open
// network client and drops its connection.
func (b *Broker) disconnectAll() {
	for _, cl := range b.srv.Clients.GetAll() {
		if !cl.Net.Inline && !cl.Closed() {
			_ = b.srv.DisconnectClient(cl, packets.ErrServerShuttingDown)
		}
	}
}
