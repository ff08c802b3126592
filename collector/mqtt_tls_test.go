package collector

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
	"os/exec"
	"path/filepath"
	"testing"
	"time"

	mqtt "github.com/eclipse/paho.mqtt.golang"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
)

// testCA writes a CA and a server certificate for 127.0.0.1 into dir and
// returns the paths of the CA certificate, server certificate and key.
func testCA(t *testing.T, dir string) (ca, cert, key string) {
	t.Helper()
	write := func(name, typ string, der []byte) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}
	caKey, _ := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	caTmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "cleanmon test CA"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour), IsCA: true, BasicConstraintsValid: true,
		KeyUsage: x509.KeyUsageCertSign | x509.KeyUsageDigitalSignature}
	caDER, err := x509.CreateCertificate(rand.Reader, caTmpl, caTmpl, &caKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	caCert, _ := x509.ParseCertificate(caDER)
	srvKey, _ := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	srvTmpl := &x509.Certificate{SerialNumber: big.NewInt(2), Subject: pkix.Name{CommonName: "127.0.0.1"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour), IPAddresses: []net.IP{net.ParseIP("127.0.0.1")},
		KeyUsage: x509.KeyUsageDigitalSignature, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}}
	srvDER, err := x509.CreateCertificate(rand.Reader, srvTmpl, caCert, &srvKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	keyDER, _ := x509.MarshalECPrivateKey(srvKey)
	return write("ca.pem", "CERTIFICATE", caDER), write("server.pem", "CERTIFICATE", srvDER), write("server.key", "EC PRIVATE KEY", keyDER)
}

// The source against a broker that takes TLS only and wants a password:
// the right password file connects and stores; a wrong one never does,
// and the failed attempts are counted.
func TestMQTTSourceTLSAndPassword(t *testing.T) {
	bin := mosquittoBin(t)
	passwd, err := exec.LookPath("mosquitto_passwd")
	if err != nil {
		passwd = filepath.Join(filepath.Dir(bin), "../bin/mosquitto_passwd")
		if _, serr := os.Stat(passwd); serr != nil {
			if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
				t.Fatal("mosquitto_passwd not found and CLEANMON_REQUIRE_TOOLS is set")
			}
			t.Skip("mosquitto_passwd not found")
		}
	}
	dir := t.TempDir()
	ca, cert, key := testCA(t, dir)
	users := filepath.Join(dir, "users")
	if out, err := exec.Command(passwd, "-c", "-b", users, "cleanmon", "s3cret-veldmark").CombinedOutput(); err != nil {
		t.Fatalf("mosquitto_passwd: %v %s", err, out)
	}
	b := newBroker(t, "cafile "+ca+"\ncertfile "+cert+"\nkeyfile "+key+"\nallow_anonymous false\npassword_file "+users+"\n")
	pwFile := filepath.Join(dir, "mqtt-password")
	if err := os.WriteFile(pwFile, []byte("s3cret-veldmark\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	cfg := demoMQTT("ssl://"+b.addr, "cleanmon-tls")
	cfg.Username, cfg.PasswordFile, cfg.TLS = "cleanmon", pwFile, &MQTTTLS{CAFile: ca}

	rig := newMQTTRig(t)
	src, err := NewMQTTSource(cfg, demoEnvRegistry(t), rig, MQTTOptions{Metrics: prometheus.NewRegistry(), MinBackoff: 50 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	stop := runSource(t, src)
	defer stop()
	waitFor(t, 10*time.Second, "connected over TLS", src.Connected)
	pool := x509.NewCertPool()
	pem, _ := os.ReadFile(ca)
	pool.AppendCertsFromPEM(pem)
	pub := publisherWith(t, mqtt.NewClientOptions().AddBroker("ssl://"+b.addr).SetUsername("cleanmon").SetPassword("s3cret-veldmark").
		SetTLSConfig(&tls.Config{RootCAs: pool, MinVersion: tls.VersionTLS12}))
	pub("building-c/hood/velocity", `{"v":0.47,"ts":"2026-03-02T09:30:00Z"}`)
	waitFor(t, 10*time.Second, "the sample stored", func() bool { return rig.esink.len() == 1 })

	wrong := filepath.Join(dir, "wrong")
	os.WriteFile(wrong, []byte("guess"), 0o600)
	cfg.ClientID, cfg.PasswordFile = "cleanmon-tls-wrong", wrong
	bad, err := NewMQTTSource(cfg, demoEnvRegistry(t), rig, MQTTOptions{Metrics: prometheus.NewRegistry(), MinBackoff: 50 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	stopBad := runSource(t, bad)
	defer stopBad()
	waitFor(t, 10*time.Second, "two refused attempts", func() bool {
		return testutil.ToFloat64(bad.metrics.connects.WithLabelValues("failed")) >= 2
	})
	if bad.Connected() || testutil.ToFloat64(bad.metrics.connects.WithLabelValues("ok")) != 0 {
		t.Error("a wrong password connected")
	}
}

// A broker that dies is reconnected to, with backoff, once it is back;
// what is published then is stored.
func TestMQTTSourceReconnectsAfterBrokerRestart(t *testing.T) {
	b := newBroker(t, "")
	rig := newMQTTRig(t)
	src, err := NewMQTTSource(demoMQTT("tcp://"+b.addr, "cleanmon-restart"), demoEnvRegistry(t), rig, MQTTOptions{Metrics: prometheus.NewRegistry(), MinBackoff: 50 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	stop := runSource(t, src)
	defer stop()
	waitFor(t, 10*time.Second, "connected", src.Connected)
	b.kill()
	waitFor(t, 10*time.Second, "the loss noticed", func() bool { return !src.Connected() })
	waitFor(t, 10*time.Second, "a refused reconnection", func() bool {
		return testutil.ToFloat64(src.metrics.connects.WithLabelValues("failed")) >= 1
	})
	b.start()
	waitFor(t, 20*time.Second, "reconnected", src.Connected)
	publisher(t, "tcp://"+b.addr)("building-c/readings/pc-hood", reading("pc-hood", 7))
	waitFor(t, 10*time.Second, "the reading stored", func() bool { n, _ := rig.sink.stored(); return n == 1 })
}
