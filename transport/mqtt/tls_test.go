package mqtt

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/broker"
)

// testPKI is a throw-away CA with a server certificate for 127.0.0.1 and a
// client certificate, all written as PEM files.
type testPKI struct {
	caFile, certFile, keyFile string // client side files
	pool                      *x509.CertPool
	server                    tls.Certificate
}

func newTestPKI(t *testing.T) *testPKI {
	t.Helper()
	dir := t.TempDir()
	caKey, _ := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	caTmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "godwit test CA"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		IsCA: true, BasicConstraintsValid: true, KeyUsage: x509.KeyUsageCertSign}
	caDER, err := x509.CreateCertificate(rand.Reader, caTmpl, caTmpl, &caKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	ca, _ := x509.ParseCertificate(caDER)
	issue := func(serial int64, usage x509.ExtKeyUsage) ([]byte, *ecdsa.PrivateKey) {
		k, _ := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
		tmpl := &x509.Certificate{SerialNumber: big.NewInt(serial), Subject: pkix.Name{CommonName: "godwit test"},
			NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
			KeyUsage: x509.KeyUsageDigitalSignature, ExtKeyUsage: []x509.ExtKeyUsage{usage},
			IPAddresses: []net.IP{net.ParseIP("127.0.0.1")}}
		der, err := x509.CreateCertificate(rand.Reader, tmpl, ca, &k.PublicKey, caKey)
		if err != nil {
			t.Fatal(err)
		}
		return der, k
	}
	writePEM := func(name, typ string, der []byte) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}
	srvDER, srvKey := issue(2, x509.ExtKeyUsageServerAuth)
	cliDER, cliKey := issue(3, x509.ExtKeyUsageClientAuth)
	cliKeyDER, _ := x509.MarshalECPrivateKey(cliKey)
	pool := x509.NewCertPool()
	pool.AddCert(ca)
	return &testPKI{
		caFile:   writePEM("ca.pem", "CERTIFICATE", caDER),
		certFile: writePEM("client.pem", "CERTIFICATE", cliDER),
		keyFile:  writePEM("client-key.pem", "EC PRIVATE KEY", cliKeyDER),
		pool:     pool,
		server:   tls.Certificate{Certificate: [][]byte{srvDER}, PrivateKey: srvKey},
	}
}

// roundTrip connects with o, subscribes, publishes one message to itself
// and checks it arrives.
func roundTrip(t *testing.T, o Options) {
	t.Helper()
	q := transport.NewQueue(8, 256, 1024)
	topic := "godwit-test/" + uniq(t) + "/x"
	c := newClient(t, o)
	c.Subscribe(topic, 1, q)
	c.Start()
	defer c.Close()
	if !c.WaitConnected(5 * time.Second) {
		t.Fatalf("%s: no connection", o.URL)
	}
	if err := c.Publish(topic, []byte(`{"v":1}`), 1, false); err != nil {
		t.Fatal(err)
	}
	var in transport.Inbound
	deadline := time.After(5 * time.Second)
	for !q.Pop(&in) {
		select {
		case <-q.Ready():
		case <-deadline:
			t.Fatalf("%s: message did not come back", o.URL)
		}
	}
	if string(in.Payload) != `{"v":1}` {
		t.Fatalf("payload %q", in.Payload)
	}
}

// TestTransports covers the URL schemes of issue 4: tcp://, ssl:// with a CA
// file and a client certificate, ws:// and wss://.
func TestTransports(t *testing.T) {
	pki := newTestPKI(t)
	plain, err := broker.Start(broker.Config{WSAddr: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	defer plain.Close()
	// Mutual TLS: the broker demands a client certificate from our CA.
	srvTLS := &tls.Config{Certificates: []tls.Certificate{pki.server}, ClientCAs: pki.pool,
		ClientAuth: tls.RequireAndVerifyClientCert, MinVersion: tls.VersionTLS12}
	secure, err := broker.Start(broker.Config{TLS: srvTLS, WSAddr: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	defer secure.Close()

	id := uniq(t)
	t.Run("tcp", func(t *testing.T) {
		roundTrip(t, Options{URL: plain.URL(), ClientID: "tcp-" + id, CleanSession: true})
	})
	t.Run("ws", func(t *testing.T) {
		waitListening(t, plain.WSURL())
		roundTrip(t, Options{URL: plain.WSURL(), ClientID: "ws-" + id, CleanSession: true})
	})
	t.Run("ssl", func(t *testing.T) {
		roundTrip(t, Options{URL: secure.URL(), ClientID: "ssl-" + id, CleanSession: true,
			CAFile: pki.caFile, CertFile: pki.certFile, KeyFile: pki.keyFile})
	})
	t.Run("wss", func(t *testing.T) {
		waitListening(t, secure.WSURL())
		roundTrip(t, Options{URL: secure.WSURL(), ClientID: "wss-" + id, CleanSession: true,
			CAFile: pki.caFile, CertFile: pki.certFile, KeyFile: pki.keyFile})
	})
	t.Run("ssl without client certificate is refused", func(t *testing.T) {
		failed := make(chan struct{})
		c := newClient(t, Options{URL: secure.URL(), ClientID: "nocert-" + id, CleanSession: true, CAFile: pki.caFile,
			OnState: func(e Event) {
				if e.Kind == ConnectFailed {
					select {
					case failed <- struct{}{}:
					default:
					}
				}
			}})
		c.Start()
		select {
		case <-failed:
		case <-time.After(10 * time.Second):
			t.Error("no connect failure reported")
		}
		c.Close()
		if c.Stats().Connects != 0 {
			t.Error("connected without a client certificate")
		}
	})
	t.Run("ssl with system roots rejects the test CA", func(t *testing.T) {
		// Without CAFile the system roots apply, which do not know our CA.
		failed := make(chan struct{}, 1)
		c := newClient(t, Options{URL: secure.URL(), ClientID: "sysroots-" + id, CleanSession: true,
			CertFile: pki.certFile, KeyFile: pki.keyFile,
			OnState: func(e Event) {
				if e.Kind == ConnectFailed {
					select {
					case failed <- struct{}{}:
					default:
					}
				}
			}})
		c.Start()
		select {
		case <-failed:
		case <-time.After(10 * time.Second):
			t.Error("no connect failure reported")
		}
		c.Close()
		if c.Stats().Connects != 0 {
			t.Error("an unknown CA was trusted")
		}
	})
}

// waitListening waits for the WebSocket listener, which binds in the
// background.
func waitListening(t *testing.T, url string) {
	t.Helper()
	addr := url[len("ws://"):]
	if url[:3] == "wss" {
		addr = url[len("wss://"):]
	}
	for range 100 {
		if c, err := net.Dial("tcp", addr); err == nil {
			c.Close()
			return
		}
		time.Sleep(20 * time.Millisecond)
	}
	t.Fatalf("%s not listening", url)
}
