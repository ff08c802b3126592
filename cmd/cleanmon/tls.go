package main

import (
	"crypto/tls"
	"fmt"
	"sync/atomic"
)

// tlsConfig is the `tls:` section: the daemon serves HTTPS from these
// files, reloaded on SIGHUP so that a renewed certificate needs no
// restart.
type tlsConfig struct {
	CertFile string `yaml:"cert_file"`
	KeyFile  string `yaml:"key_file"`
}

func (t tlsConfig) enabled() bool { return t.CertFile != "" || t.KeyFile != "" }

// certReloader hands the current certificate to every handshake.
type certReloader struct {
	cert atomic.Pointer[tls.Certificate]
}

// load reads the pair; on error the certificate in use stays.
func (c *certReloader) load(t tlsConfig) error {
	pair, err := tls.LoadX509KeyPair(t.CertFile, t.KeyFile)
	if err != nil {
		return fmt.Errorf("tls: %w", err)
	}
	c.cert.Store(&pair)
	return nil
}

func (c *certReloader) get(*tls.ClientHelloInfo) (*tls.Certificate, error) {
	return c.cert.Load(), nil
}

// serverTLS is the daemon's TLS configuration: TLS 1.2 at least, as plant
// networks still hold clients that cannot do 1.3; Go's default cipher
// suites, which exclude the weak ones.
func (c *certReloader) serverTLS() *tls.Config {
	return &tls.Config{MinVersion: tls.VersionTLS12, GetCertificate: c.get}
}
