package main

import (
	"io"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// Names of the files `cleanmon keygen` writes.
const keygenPrivate, keygenPublic = ops.PrivateKeyFile, ops.PublicKeyFile

// runKeygen writes a new key pair for the audit chain into --out DIR
// (ops.Keygen).
func runKeygen(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("keygen", "--out DIR", stderr)
	out := fs.String("out", "", "directory for the key pair (created 0700 if missing); keep it outside the data directory")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	return exit(stderr, "keygen", ops.Keygen(*out, pos, stdout))
}
