package store

import (
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha256"
	"crypto/x509"
	"encoding/hex"
	"encoding/pem"
	"errors"
	"fmt"
	"os"
)

// The audit chain is signed with Ed25519 rather than authenticated with
// an HMAC: the daemon holds the private key (outside the data directory),
// while an auditor, a notifier receiving checkpoints, or `verify` needs
// only the public key, and holding it does not let anyone forge an entry.
// With an HMAC every verifier could also write.

// ErrKey reports an audit key file that cannot be used.
var ErrKey = errors.New("store: audit key")

// AuditSigner signs audit entries and checkpoints. Load it with
// LoadAuditSigner; its zero value is not usable.
type AuditSigner struct {
	priv ed25519.PrivateKey
	id   string
}

// KeyID names the key: the first 8 bytes of the SHA-256 of its public
// key, in hex. Entries and checkpoints carry it so that a verifier holding
// several public keys (after a rotation) knows which one to use.
func (s *AuditSigner) KeyID() string { return s.id }

// Public returns the public key that verifies the signer's signatures.
func (s *AuditSigner) Public() ed25519.PublicKey { return s.priv.Public().(ed25519.PublicKey) }

// KeyID returns the id of a public key, as AuditSigner.KeyID does.
func KeyID(pub ed25519.PublicKey) string {
	sum := sha256.Sum256(pub)
	return hex.EncodeToString(sum[:8])
}

const (
	pemPrivate = "PRIVATE KEY"
	pemPublic  = "PUBLIC KEY"
)

// GenerateAuditKey makes a new Ed25519 key pair and returns the private
// key as PKCS #8 PEM and the public key as PKIX PEM, the forms `openssl`
// reads too.
func GenerateAuditKey() (privPEM, pubPEM []byte, err error) {
	pub, priv, err := ed25519.GenerateKey(rand.Reader)
	if err != nil {
		return nil, nil, fmt.Errorf("%w: generate: %w", ErrKey, err)
	}
	p8, err := x509.MarshalPKCS8PrivateKey(priv)
	if err != nil {
		return nil, nil, fmt.Errorf("%w: encode: %w", ErrKey, err)
	}
	pk, err := x509.MarshalPKIXPublicKey(pub)
	if err != nil {
		return nil, nil, fmt.Errorf("%w: encode: %w", ErrKey, err)
	}
	return pem.EncodeToMemory(&pem.Block{Type: pemPrivate, Bytes: p8}),
		pem.EncodeToMemory(&pem.Block{Type: pemPublic, Bytes: pk}), nil
}

// WriteAuditKeyFiles generates a key pair and writes the private key to
// privPath (mode 0600) and the public key to pubPath (0644). Neither file
// may exist: an existing key is never overwritten. Keep the private key
// outside the data directory, and a copy of the public key off the
// machine. It returns the key id.
func WriteAuditKeyFiles(privPath, pubPath string) (string, error) {
	priv, pub, err := GenerateAuditKey()
	if err != nil {
		return "", err
	}
	if err := writeNew(privPath, priv, 0o600); err != nil {
		return "", err
	}
	if err := writeNew(pubPath, pub, 0o644); err != nil {
		_ = os.Remove(privPath)
		return "", err
	}
	s, err := ParseAuditSigner(priv)
	if err != nil {
		return "", err
	}
	return s.KeyID(), nil
}

func writeNew(path string, data []byte, mode os.FileMode) error {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, mode)
	if err != nil {
		return fmt.Errorf("%w: %w", ErrKey, err)
	}
	if _, err := f.Write(data); err != nil {
		_ = f.Close()
		_ = os.Remove(path)
		return fmt.Errorf("%w: write %s: %w", ErrKey, path, err)
	}
	if err := f.Sync(); err != nil {
		_ = f.Close()
		return fmt.Errorf("%w: sync %s: %w", ErrKey, path, err)
	}
	return f.Close()
}

// LoadAuditSigner reads a private key file written by WriteAuditKeyFiles.
// A file readable by others than its owner is refused: whoever reads it
// can forge the record.
func LoadAuditSigner(path string) (*AuditSigner, error) {
	info, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrKey, err)
	}
	if info.Mode().Perm()&0o077 != 0 {
		return nil, fmt.Errorf("%w: %s is readable by group or others (mode %v): chmod 600 it", ErrKey, path, info.Mode().Perm())
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrKey, err)
	}
	s, err := ParseAuditSigner(b)
	if err != nil {
		return nil, fmt.Errorf("%w (%s)", err, path)
	}
	return s, nil
}

// ParseAuditSigner reads a PKCS #8 PEM Ed25519 private key.
func ParseAuditSigner(pemBytes []byte) (*AuditSigner, error) {
	blk, _ := pem.Decode(pemBytes)
	if blk == nil || blk.Type != pemPrivate {
		return nil, fmt.Errorf("%w: not a PEM %q block", ErrKey, pemPrivate)
	}
	k, err := x509.ParsePKCS8PrivateKey(blk.Bytes)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrKey, err)
	}
	priv, ok := k.(ed25519.PrivateKey)
	if !ok {
		return nil, fmt.Errorf("%w: the key is not an Ed25519 key", ErrKey)
	}
	return &AuditSigner{priv: priv, id: KeyID(priv.Public().(ed25519.PublicKey))}, nil
}

// LoadAuditPublicKey reads a public key file (PKIX PEM), or the public
// half of a private key file, for verifying.
func LoadAuditPublicKey(path string) (ed25519.PublicKey, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrKey, err)
	}
	blk, _ := pem.Decode(b)
	if blk == nil {
		return nil, fmt.Errorf("%w: %s holds no PEM block", ErrKey, path)
	}
	if blk.Type == pemPrivate {
		s, err := ParseAuditSigner(b)
		if err != nil {
			return nil, err
		}
		return s.Public(), nil
	}
	k, err := x509.ParsePKIXPublicKey(blk.Bytes)
	if err != nil {
		return nil, fmt.Errorf("%w: %s: %w", ErrKey, path, err)
	}
	pub, ok := k.(ed25519.PublicKey)
	if !ok {
		return nil, fmt.Errorf("%w: %s is not an Ed25519 public key", ErrKey, path)
	}
	return pub, nil
}
