package mqtt

import (
	"bufio"
	"crypto/tls"
	"errors"
	"net"
	"net/url"
	"os"
	"syscall"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"golang.org/x/net/proxy"
)

// readBufferBytes is the read buffer on the broker connection. paho reads
// every packet straight from the connection, a byte for the header, a byte
// per length digit and then the body, so without a buffer each received
// message costs three or more read system calls; with one, a burst of
// messages costs one. 16 KiB holds a few dozen sensor messages; a larger
// packet is read through it directly.
const readBufferBytes = 16 << 10

// bufferedConn is a net.Conn whose reads go through a buffer. Writes,
// deadlines and Close are the connection's own, so paho's write path and
// its timeouts are unchanged.
type bufferedConn struct {
	net.Conn
	r *bufio.Reader
}

func (c *bufferedConn) Read(p []byte) (int, error) { return c.r.Read(p) }

func newBufferedConn(c net.Conn) net.Conn {
	return &bufferedConn{Conn: c, r: bufio.NewReaderSize(c, readBufferBytes)}
}

// quickAckConn acknowledges received data at once. A broker that leaves
// Nagle's algorithm on (Mosquitto's default, set_tcp_nodelay false) holds
// back its next message to us until our kernel acknowledges the last one,
// and Linux delays acknowledgements on a connection that mostly receives:
// sensor messages then arrived in clumps milliseconds late. TCP_QUICKACK
// is not sticky, so it is set again after every read (common practice).
type quickAckConn struct {
	*net.TCPConn
	raw syscall.RawConn
}

func (c *quickAckConn) Read(p []byte) (int, error) {
	n, err := c.TCPConn.Read(p)
	setQuickAck(c.raw)
	return n, err
}

// withQuickAck wraps a TCP connection; others are returned as they are.
func withQuickAck(c net.Conn) net.Conn {
	tc, ok := c.(*net.TCPConn)
	if !ok {
		return c
	}
	raw, err := tc.SyscallConn()
	if err != nil {
		return c
	}
	setQuickAck(raw)
	return &quickAckConn{TCPConn: tc, raw: raw}
}

// bufferedSchemes are the URL schemes dialled by openBuffered; WebSocket
// connections keep paho's own dialler (their frames are already read in
// blocks).
func bufferedScheme(scheme string) bool {
	switch scheme {
	case "tcp", "mqtt", "ssl", "tls", "mqtts":
		return true
	}
	return false
}

// openBuffered is paho's connection opener for TCP and TLS, as paho does it
// (honouring the proxy environment variables), with the read buffer added.
func openBuffered(uri *url.URL, o paho.ClientOptions) (net.Conn, error) {
	dialer := o.Dialer
	if dialer == nil {
		dialer = &net.Dialer{Timeout: o.ConnectTimeout}
	}
	var conn net.Conn
	var err error
	switch uri.Scheme {
	case "tcp", "mqtt":
		conn, err = proxy.FromEnvironmentUsing(dialer).Dial("tcp", uri.Host)
		if err == nil {
			conn = withQuickAck(conn)
		}
	case "ssl", "tls", "mqtts":
		conn, err = dialTLS(dialer, uri.Host, o.TLSConfig)
	default:
		return nil, errors.New("mqtt: no buffered dialler for scheme " + uri.Scheme)
	}
	if err != nil {
		return nil, err
	}
	return newBufferedConn(conn), nil
}

// dialTLS connects through the proxy environment variables when set, as
// paho does, and runs the handshake over the quick-acknowledging TCP
// connection.
func dialTLS(dialer *net.Dialer, host string, tc *tls.Config) (net.Conn, error) {
	var raw net.Conn
	var err error
	if os.Getenv("all_proxy") == "" {
		raw, err = dialer.Dial("tcp", host)
	} else {
		raw, err = proxy.FromEnvironment().Dial("tcp", host)
	}
	if err != nil {
		return nil, err
	}
	if tc == nil {
		tc = &tls.Config{MinVersion: tls.VersionTLS12}
	}
	if tc.ServerName == "" {
		// tls.Client, unlike tls.DialWithDialer, does not take the name
		// from the address.
		tc = tc.Clone()
		if h, _, err := net.SplitHostPort(host); err == nil {
			tc.ServerName = h
		}
	}
	tlsConn := tls.Client(withQuickAck(raw), tc)
	if dialer.Timeout > 0 {
		_ = raw.SetDeadline(time.Now().Add(dialer.Timeout))
	}
	if err := tlsConn.Handshake(); err != nil {
		_ = raw.Close()
		return nil, err
	}
	_ = raw.SetDeadline(time.Time{})
	return tlsConn, nil
}
