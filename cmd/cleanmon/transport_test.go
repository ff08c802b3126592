package main

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/sha256"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/hex"
	"encoding/pem"
	"fmt"
	"io"
	"math/big"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// selfSigned writes a certificate for 127.0.0.1 and its key.
func selfSigned(t *testing.T, dir, name string) (certFile, keyFile string, pool *x509.CertPool) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(time.Now().UnixNano()), Subject: pkix.Name{CommonName: name},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		IPAddresses: []net.IP{net.ParseIP("127.0.0.1")}, KeyUsage: x509.KeyUsageDigitalSignature,
		ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	kb, _ := x509.MarshalECPrivateKey(key)
	certFile, keyFile = filepath.Join(dir, name+".crt"), filepath.Join(dir, name+".key")
	os.WriteFile(certFile, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600)
	os.WriteFile(keyFile, pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kb}), 0o600)
	c, _ := x509.ParseCertificate(der)
	pool = x509.NewCertPool()
	pool.AddCert(c)
	return certFile, keyFile, pool
}

func transportSite(tokens map[string]string, certFile, keyFile string, rps int) string {
	var b strings.Builder
	b.WriteString("site: \"Veldmark Photonics, building C\"\naccess:\n")
	fmt.Fprintf(&b, "  rate_limit: {requests_per_second: %d, burst: %d}\n  tokens:\n", rps, rps)
	for name, secret := range tokens {
		sum := sha256.Sum256([]byte(secret))
		fmt.Fprintf(&b, "    - {name: %s, sha256: %q, role: viewer}\n", name, hex.EncodeToString(sum[:]))
	}
	if certFile != "" {
		fmt.Fprintf(&b, "tls: {cert_file: %q, key_file: %q}\n", certFile, keyFile)
	}
	b.WriteString("zones:\n  - id: corridor\n    name: Corridor\n")
	return b.String()
}

func get(t *testing.T, c *http.Client, url, token string) (int, http.Header) {
	t.Helper()
	req, _ := http.NewRequest("GET", url, nil)
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := c.Do(req)
	if err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
	resp.Body.Close()
	return resp.StatusCode, resp.Header
}

// TestTLSAndReload serves HTTPS from files, refuses TLS 1.1, and on
// SIGHUP takes a new certificate and a new token list without a restart:
// the added token works at once, the revoked one is refused, and the
// reload is in the audit trail.
func TestTLSAndReload(t *testing.T) {
	dir := t.TempDir()
	cert1, key1, pool1 := selfSigned(t, dir, "first")
	cfg := filepath.Join(dir, "site.yaml")
	os.WriteFile(cfg, []byte(transportSite(map[string]string{"wall": "secret-wall", "old": "secret-old"}, cert1, key1, 1000)), 0o600)
	d := startDaemon(t, "--config", cfg, "--data", filepath.Join(dir, "data"))
	if !strings.HasPrefix(d.url, "https://") {
		t.Fatalf("serving on %s, want https", d.url)
	}
	client := func(pool *x509.CertPool, maxVersion uint16) *http.Client {
		return &http.Client{Timeout: 10 * time.Second, Transport: &http.Transport{TLSClientConfig: &tls.Config{RootCAs: pool, MaxVersion: maxVersion}}}
	}
	if code, _ := get(t, client(pool1, 0), d.url+"/api/v1/zones", "secret-old"); code != 200 {
		t.Fatalf("old token before reload: %d", code)
	}
	if _, err := client(pool1, tls.VersionTLS11).Get(d.url + "/healthz"); err == nil {
		t.Error("a TLS 1.1 client was served; the minimum is TLS 1.2")
	}
	// Renewed certificate, one token revoked and one added.
	cert2, key2, pool2 := selfSigned(t, dir, "second")
	os.WriteFile(cfg, []byte(transportSite(map[string]string{"wall": "secret-wall", "new": "secret-new"}, cert2, key2, 1000)), 0o600)
	d.Signal(syscall.SIGHUP)
	waitFor(t, 10*time.Second, "the reload", func() bool {
		// Until the reload lands the old certificate is served, which this
		// client does not trust: that is a "not yet", not a failure.
		req, _ := http.NewRequest("GET", d.url+"/api/v1/zones", nil)
		req.Header.Set("Authorization", "Bearer secret-new")
		resp, err := client(pool2, 0).Do(req)
		if err != nil {
			return false
		}
		resp.Body.Close()
		return resp.StatusCode == 200
	})
	if code, _ := get(t, client(pool2, 0), d.url+"/api/v1/zones", "secret-old"); code != 401 {
		t.Errorf("revoked token: %d, want 401", code)
	}
	if code, _ := get(t, client(pool2, 0), d.url+"/api/v1/zones", "secret-wall"); code != 200 {
		t.Errorf("kept token: %d", code)
	}
	// The entry is written just after the tokens are swapped: wait for it.
	waitFor(t, 10*time.Second, "the reload in the audit trail", func() bool {
		req, _ := http.NewRequest("GET", d.url+"/api/v1/audit", nil)
		req.Header.Set("Authorization", "Bearer secret-wall")
		resp, err := client(pool2, 0).Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return strings.Contains(string(b), "tokens added: new; tokens revoked: old")
	})
	// A broken file on reload changes nothing.
	os.WriteFile(cfg, []byte("site: [unclosed\n"), 0o600)
	d.Signal(syscall.SIGHUP)
	time.Sleep(300 * time.Millisecond) // the refusal is only logged; give it a moment, then check nothing moved
	if code, _ := get(t, client(pool2, 0), d.url+"/api/v1/zones", "secret-new"); code != 200 {
		t.Errorf("a broken reload changed the tokens: %d", code)
	}
	for _, s := range []string{"secret-wall", "secret-new", "secret-old"} {
		if strings.Contains(d.logs.String(), s) {
			t.Errorf("a token secret appears in the log")
		}
	}
}

// TestRateLimit answers 429 with Retry-After once a token spends its burst.
func TestRateLimit(t *testing.T) {
	dir := t.TempDir()
	cfg := filepath.Join(dir, "site.yaml")
	os.WriteFile(cfg, []byte(transportSite(map[string]string{"wall": "secret-wall"}, "", "", 5)), 0o600)
	d := startDaemon(t, "--config", cfg, "--data", filepath.Join(dir, "data"))
	c := &http.Client{Timeout: 10 * time.Second}
	limited := false
	for i := 0; i < 50 && !limited; i++ {
		code, h := get(t, c, d.url+"/api/v1/zones", "secret-wall")
		if code == http.StatusTooManyRequests {
			limited = true
			if h.Get("Retry-After") == "" {
				t.Error("429 without Retry-After")
			}
		}
	}
	if !limited {
		t.Fatal("50 requests at once passed a limit of 5 a second with a burst of 5")
	}
}

// Plain HTTP on an address other than loopback is refused unless the
// configuration allows it (refused before anything listens).
func TestPlainHTTPOffLoopbackRefused(t *testing.T) {
	dir := t.TempDir()
	cfg := filepath.Join(dir, "site.yaml")
	os.WriteFile(cfg, []byte(transportSite(nil, "", "", 10)), 0o600)
	out, err := exec.Command(cleanmonBinary(t), "serve", "--config", cfg, "--data", filepath.Join(dir, "data"), "--listen", "0.0.0.0:0").CombinedOutput()
	ee, ok := err.(*exec.ExitError)
	if !ok || ee.ExitCode() != exitUsage || !strings.Contains(string(out), "refusing plain HTTP") {
		t.Errorf("exit %v: %s", err, out)
	}
}
