package ops

import (
	"crypto/ed25519"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"

	"cleanmon/store"
)

// VerifyOptions are the flags of `cleanmon verify`.
type VerifyOptions struct {
	Paths []string            // the store: --data, --file or the argument; exactly one
	Keys  []ed25519.PublicKey // public keys of the audit signatures
	Head  string              // file of kept checkpoints, or ""
}

// Verify checks a store: bbolt's own consistency check plus the store's
// invariants, and, with keys and a head, the signatures of the audit chain
// and a kept checkpoint. Every fault goes to stdout; finding one is an
// error (a fault, not bad usage).
func Verify(o VerifyOptions, stdout io.Writer) error {
	if len(o.Paths) != 1 {
		return usage(errors.New("name exactly one store: --data DIR, --file PATH, or a data directory or database file as the argument"))
	}
	path := o.Paths[0]
	opt := store.VerifyOptions{Keys: o.Keys}
	if o.Head != "" {
		cp, err := store.ReadCheckpointFile(o.Head)
		if err != nil {
			return usage(err)
		}
		opt.Head = &cp
	}
	problems, err := store.VerifyWith(path, opt)
	for _, p := range problems {
		fmt.Fprintf(stdout, "fault: %s\n", p)
	}
	if err != nil {
		return fault(err)
	}
	if len(problems) > 0 {
		return &Error{Lines: []string{fmt.Sprintf("%d faults in %s; restore from the latest verified backup", len(problems), path)}}
	}
	what := "no key given: a rewrite with recomputed hashes would not show (give --key)"
	if len(o.Keys) > 0 {
		what = fmt.Sprintf("signatures checked with %d key(s)", len(o.Keys))
	}
	if opt.Head != nil {
		what += fmt.Sprintf("; holds the kept checkpoint #%d", opt.Head.Seq)
	}
	fmt.Fprintf(stdout, "ok: %s verified, no faults; %s\n", path, what)
	return nil
}

// Compact rewrites the stopped store in data without its free pages,
// waiting up to wait for a process holding it to let go.
func Compact(data string, wait time.Duration, args []string, stdout io.Writer) error {
	if len(args) > 0 || data == "" {
		return usage(fmt.Errorf("give --data DIR and nothing else"))
	}
	// A mistyped directory must not come back as "compacted": there is
	// nothing there to compact, and nothing is created.
	if _, err := os.Stat(filepath.Join(data, store.FileName)); err != nil {
		return usage(fmt.Errorf("no store in %s: %w", data, err))
	}
	res, err := store.CompactFile(data, wait)
	if err != nil {
		return fault(err)
	}
	fmt.Fprintf(stdout, "ok: %s compacted, %.1f MB → %.1f MB on disk in %s\n", data,
		float64(res.Before)/1e6, float64(res.After)/1e6, res.Took.Round(time.Millisecond))
	return nil
}

// Names of the files Keygen writes.
const (
	PrivateKeyFile = "cleanmon-audit.key"
	PublicKeyFile  = "cleanmon-audit.pub"
)

// Keygen writes a new Ed25519 key pair for the audit chain into the
// directory out, never over an existing file, and says where each half
// belongs.
func Keygen(out string, args []string, stdout io.Writer) error {
	switch {
	case len(args) > 0:
		return usage(fmt.Errorf("unexpected argument %q", args[0]))
	case out == "":
		return usage(errors.New("--out DIR is required"))
	}
	if err := os.MkdirAll(out, 0o700); err != nil {
		return usage(err)
	}
	priv, pub := filepath.Join(out, PrivateKeyFile), filepath.Join(out, PublicKeyFile)
	id, err := store.WriteAuditKeyFiles(priv, pub)
	if err != nil {
		return fault(err)
	}
	fmt.Fprintf(stdout, "key %s written\n", id)
	fmt.Fprintf(stdout, "private key: %s\n  readable by the daemon's user only, outside the data directory; name it in audit.signing_key_file.\n", priv)
	fmt.Fprintf(stdout, "public key:  %s\n  copy it off this machine (to QA, the auditor); `cleanmon verify --key` needs it, and every earlier one after a rotation.\n", pub)
	return nil
}
