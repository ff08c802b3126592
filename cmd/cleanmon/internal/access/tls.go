package access

import (
	"crypto/tls"
	"fmt"
	"sync/atomic"
)

// TLSConfig is the `tls:` section: the daemon serves HTTPS from these
// files, reloaded on SIGHUP so that a renewed certificate needs no
// restart.
type TLSConfig struct {
	CertFile string `yaml:"cert_file"`
	KeyFile  string `yaml:"key_file"`
}

// Enabled tells whether the daemon serves HTTPS.
func (t TLSConfig) Enabled() bool { return t.CertFile != "" || t.KeyFile != "" }

// CertReloader hands the current certificate to every handshake.
type CertReloader struct {
	cert atomic.Pointer[tls.Certificate]
}

// Load reads the pair; on error the certificate in use stays.
func (c *CertReloader) Load(t TLSConfig) error {
	pair, err := tls.LoadX509KeyPair(t.CertFile, t.KeyFile)
	if err != nil {
		return fmt.Errorf("tls: %w", err)
	}
	c.cert.Store(&pair)
	return nil
}

func (c *CertReloader) get(*tls.ClientHelloInfo) (*tls.Certificate, error) {
	return c.cert.Load(), nil
}

// ServerTLS is the daemon's TLS configuration: TLS 1.2 at least, as plant
// networks still hold clients that cannot do 1.3, and under 1.2 only the
// forward-secret AEAD suites (GCM, ChaCha20-Poly1305): no CBC suite, whose
// padding has been attacked again and again. TLS 1.3 suites are all AEAD
// and not configurable.
func (c *CertReloader) ServerTLS() *tls.Config {
	return &tls.Config{MinVersion: tls.VersionTLS12, CipherSuites: AEADSuites, GetCertificate: c.get}
}

// AEADSuites are the TLS 1.2 cipher suites the daemon offers.
var AEADSuites = []uint16{
	tls.TLS_ECDHE_ECDSA_WITH_AES_128_GCM_SHA256,
	tls.TLS_ECDHE_RSA_WITH_AES_128_GCM_SHA256,
	tls.TLS_ECDHE_ECDSA_WITH_AES_256_GCM_SHA384,
	tls.TLS_ECDHE_RSA_WITH_AES_256_GCM_SHA384,
	tls.TLS_ECDHE_ECDSA_WITH_CHACHA20_POLY1305_SHA256,
	tls.TLS_ECDHE_RSA_WITH_CHACHA20_POLY1305_SHA256,
}
