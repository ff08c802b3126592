package main

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"cleanmon/store"
)

// Names of the files `cleanmon keygen` writes.
const (
	keygenPrivate = "cleanmon-audit.key"
	keygenPublic  = "cleanmon-audit.pub"
)

// runKeygen writes a new Ed25519 key pair for the audit chain into --out
// DIR, never over an existing file, and says where each half belongs.
func runKeygen(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("keygen", "--out DIR", stderr)
	out := fs.String("out", "", "directory for the key pair (created 0700 if missing); keep it outside the data directory")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	switch {
	case len(pos) > 0:
		return fail(stderr, "keygen", fmt.Errorf("unexpected argument %q", pos[0]))
	case *out == "":
		return fail(stderr, "keygen", errors.New("--out DIR is required"))
	}
	if err := os.MkdirAll(*out, 0o700); err != nil {
		return fail(stderr, "keygen", err)
	}
	priv, pub := filepath.Join(*out, keygenPrivate), filepath.Join(*out, keygenPublic)
	id, err := store.WriteAuditKeyFiles(priv, pub)
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon keygen: %s\n", oneLine(err.Error()))
		return exitFail
	}
	fmt.Fprintf(stdout, "key %s written\n", id)
	fmt.Fprintf(stdout, "private key: %s\n  readable by the daemon's user only, outside the data directory; name it in audit.signing_key_file.\n", priv)
	fmt.Fprintf(stdout, "public key:  %s\n  copy it off this machine (to QA, the auditor); `cleanmon verify --key` needs it, and every earlier one after a rotation.\n", pub)
	return exitOK
}
