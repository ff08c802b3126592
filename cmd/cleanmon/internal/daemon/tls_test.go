package daemon

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// tlsSite writes the minimal site with a self-signed ECDSA certificate
// for 127.0.0.1 and returns the configuration file and a pool trusting
// the certificate.
func tlsSite(t *testing.T) (string, *x509.CertPool) {
	t.Helper()
	dir := t.TempDir()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "cleanmon test"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		IPAddresses: []net.IP{net.ParseIP("127.0.0.1")}, KeyUsage: x509.KeyUsageDigitalSignature, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	kder, err := x509.MarshalECPrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	cert, keyf := filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem")
	os.WriteFile(cert, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600)
	os.WriteFile(keyf, pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kder}), 0o600)
	base, err := os.ReadFile(minimalSite)
	if err != nil {
		t.Fatal(err)
	}
	site := filepath.Join(dir, "site.yaml")
	os.WriteFile(site, append(base, []byte("tls: {cert_file: "+cert+", key_file: "+keyf+"}\n")...), 0o600)
	c, _ := x509.ParseCertificate(der)
	pool := x509.NewCertPool()
	pool.AddCert(c)
	return site, pool
}

// The listener speaks TLS from the first connection: a client that
// connects before Run starts must still see a handshake (run with -race:
// the listener is wrapped before Serve, never swapped while it runs).
// TLS 1.2 offers AEAD suites only, older versions and CBC suites are
// refused, and HTTPS answers carry HSTS.
func TestTLSFromTheFirstConnection(t *testing.T) {
	site, pool := tlsSite(t)
	for round := 0; round < 3; round++ {
		d, err := New(Options{ConfigPath: site, DataDir: t.TempDir(), Listen: "127.0.0.1:0", Log: quietLog()})
		if err != nil {
			t.Fatal(err)
		}
		addr := strings.TrimPrefix(d.Addr(), "https://")
		type result struct {
			st  tls.ConnectionState
			err error
		}
		first := make(chan result, 1)
		go func() {
			c, err := tls.DialWithDialer(&net.Dialer{Timeout: 10 * time.Second}, "tcp", addr, &tls.Config{RootCAs: pool})
			if err != nil {
				first <- result{err: err}
				return
			}
			defer c.Close()
			first <- result{st: c.ConnectionState()}
		}()
		ctx, cancel := context.WithCancel(context.Background())
		done := make(chan error, 1)
		go func() { done <- d.Run(ctx) }()
		r := <-first
		if r.err != nil || !r.st.HandshakeComplete || r.st.Version < tls.VersionTLS12 {
			t.Fatalf("round %d: first connection: %v, handshake %v, version %x", round, r.err, r.st.HandshakeComplete, r.st.Version)
		}
		if round == 0 {
			checkTLSPolicy(t, addr, pool)
		}
		cancel()
		<-done
		if err := d.Close(); err != nil {
			t.Fatal(err)
		}
	}
}

func checkTLSPolicy(t *testing.T, addr string, pool *x509.CertPool) {
	t.Helper()
	refused := map[string]*tls.Config{
		"TLS 1.1": {RootCAs: pool, MaxVersion: tls.VersionTLS11},
		"TLS 1.2 with CBC suites only": {RootCAs: pool, MaxVersion: tls.VersionTLS12, CipherSuites: []uint16{
			tls.TLS_ECDHE_ECDSA_WITH_AES_128_CBC_SHA, tls.TLS_ECDHE_ECDSA_WITH_AES_256_CBC_SHA, tls.TLS_ECDHE_ECDSA_WITH_AES_128_CBC_SHA256}},
	}
	for name, cfg := range refused {
		if c, err := tls.Dial("tcp", addr, cfg); err == nil {
			c.Close()
			t.Errorf("%s: handshake accepted", name)
		}
	}
	c, err := tls.Dial("tcp", addr, &tls.Config{RootCAs: pool, MaxVersion: tls.VersionTLS12})
	if err != nil {
		t.Fatalf("TLS 1.2: %v", err)
	}
	if name := tls.CipherSuiteName(c.ConnectionState().CipherSuite); !strings.Contains(name, "GCM") && !strings.Contains(name, "CHACHA20_POLY1305") {
		t.Errorf("TLS 1.2 negotiated %s, not an AEAD suite", name)
	}
	c.Close()
	client := &http.Client{Timeout: 10 * time.Second, Transport: &http.Transport{TLSClientConfig: &tls.Config{RootCAs: pool}}}
	resp, err := client.Get("https://" + addr + "/healthz")
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if h := resp.Header.Get("Strict-Transport-Security"); !strings.HasPrefix(h, "max-age=") {
		t.Errorf("HSTS header %q", h)
	}
}
