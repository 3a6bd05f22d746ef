package mqtt

import (
	"bufio"
	"io"
	"net"
	"net/url"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
)

// A TCP broker connection reads through the buffer and acknowledges at
// once; bytes come through unchanged whatever the read sizes, as paho's
// one-byte header reads need.
func TestOpenBufferedTCP(t *testing.T) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	want := make([]byte, 3*readBufferBytes+17)
	for i := range want {
		want[i] = byte(i * 7)
	}
	go func() {
		c, err := ln.Accept()
		if err != nil {
			return
		}
		defer c.Close()
		w := bufio.NewWriterSize(c, 1000)
		_, _ = w.Write(want)
		_ = w.Flush()
	}()
	o := paho.NewClientOptions().SetConnectTimeout(2 * time.Second)
	conn, err := openBuffered(&url.URL{Scheme: "tcp", Host: ln.Addr().String()}, *o)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	bc, ok := conn.(*bufferedConn)
	if !ok {
		t.Fatalf("connection is %T, want *bufferedConn", conn)
	}
	if _, ok := bc.Conn.(*quickAckConn); !ok {
		t.Errorf("underlying connection is %T, want *quickAckConn", bc.Conn)
	}
	got := make([]byte, 0, len(want))
	one := make([]byte, 1)
	for len(got) < len(want) {
		// Alternate one-byte and large reads.
		if len(got)%2 == 0 {
			if _, err := io.ReadFull(conn, one); err != nil {
				t.Fatal(err)
			}
			got = append(got, one[0])
			continue
		}
		buf := make([]byte, 5000)
		n, err := conn.Read(buf)
		if err != nil {
			t.Fatal(err)
		}
		got = append(got, buf[:n]...)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("byte %d is %d, want %d", i, got[i], want[i])
		}
	}
}

func TestBufferedSchemes(t *testing.T) {
	for scheme, want := range map[string]bool{"tcp": true, "mqtt": true, "ssl": true, "tls": true, "mqtts": true, "ws": false, "wss": false} {
		if got := bufferedScheme(scheme); got != want {
			t.Errorf("%s: %v, want %v", scheme, got, want)
		}
	}
}
