package main

import (
	"io"

	"cleanmon/cmd/cleanmon/internal/ops"
	"cleanmon/store"
)

// runVerify checks a store named by --data DIR, --file PATH, or as the one
// argument (ops.Verify). Exit 0 when it finds nothing, 1 when it finds a
// fault (every fault is listed), 2 for bad usage.
func runVerify(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("verify", "--data DIR | --file PATH | PATH [--key PUBKEY]... [--head CHECKPOINT_FILE]", stderr)
	var o ops.VerifyOptions
	data := fs.String("data", "", "data directory of the store (the daemon must be stopped)")
	file := fs.String("file", "", "a store file, such as a backup copy")
	fs.Func("key", "public key `FILE` of the audit signatures (from cleanmon keygen); repeat for every key used since the chain began", func(p string) error {
		k, err := store.LoadAuditPublicKey(p)
		o.Keys = append(o.Keys, k)
		return err
	})
	fs.StringVar(&o.Head, "head", "", "a `FILE` of checkpoints the daemon published (or log lines holding them); the newest must still be in the chain")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	o.Paths = pos
	for _, p := range []string{*data, *file} {
		if p != "" {
			o.Paths = append(o.Paths, p)
		}
	}
	return exit(stderr, "verify", ops.Verify(o, stdout))
}
