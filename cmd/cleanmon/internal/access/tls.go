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
// networks still hold clients that cannot do 1.3; Go's default cipher
// suites, which exclude the weak ones.
func (c *CertReloader) ServerTLS() *tls.Config {
	return &tls.Config{MinVersion: tls.VersionTLS12, GetCertificate: c.get}
}
