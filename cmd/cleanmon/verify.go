package main

import (
	"crypto/ed25519"
	"errors"
	"fmt"
	"io"

	"cleanmon/store"
)

// runVerify checks a store: bbolt's own consistency check plus the
// store's invariants, and, with --key and --head, the signatures of the
// audit chain and a kept checkpoint. The store is named by --data DIR,
// --file PATH, or as the one argument (a data directory or a database
// file: the path the daemon's integrity message prints). Exit 0 when it
// finds nothing, 1 when it finds a fault (every fault is listed), 2 for
// bad usage.
func runVerify(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("verify", "--data DIR | --file PATH | PATH [--key PUBKEY]... [--head CHECKPOINT_FILE]", stderr)
	data := fs.String("data", "", "data directory of the store (the daemon must be stopped)")
	file := fs.String("file", "", "a store file, such as a backup copy")
	var keys []ed25519.PublicKey
	fs.Func("key", "public key `FILE` of the audit signatures (from cleanmon keygen); repeat for every key used since the chain began", func(p string) error {
		k, err := store.LoadAuditPublicKey(p)
		keys = append(keys, k)
		return err
	})
	head := fs.String("head", "", "a `FILE` of checkpoints the daemon published (or log lines holding them); the newest must still be in the chain")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	paths := pos
	for _, p := range []string{*data, *file} {
		if p != "" {
			paths = append(paths, p)
		}
	}
	if len(paths) != 1 {
		return fail(stderr, "verify", errors.New("name exactly one store: --data DIR, --file PATH, or a data directory or database file as the argument"))
	}
	path := paths[0]
	opt := store.VerifyOptions{Keys: keys}
	if *head != "" {
		cp, err := store.ReadCheckpointFile(*head)
		if err != nil {
			return fail(stderr, "verify", err)
		}
		opt.Head = &cp
	}
	problems, err := store.VerifyWith(path, opt)
	for _, p := range problems {
		fmt.Fprintf(stdout, "fault: %s\n", p)
	}
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon verify: %s\n", oneLine(err.Error()))
		return exitFail
	}
	if len(problems) > 0 {
		fmt.Fprintf(stderr, "cleanmon verify: %d faults in %s; restore from the latest verified backup\n", len(problems), path)
		return exitFail
	}
	what := "no key given: a rewrite with recomputed hashes would not show (give --key)"
	if len(keys) > 0 {
		what = fmt.Sprintf("signatures checked with %d key(s)", len(keys))
	}
	if opt.Head != nil {
		what += fmt.Sprintf("; holds the kept checkpoint #%d", opt.Head.Seq)
	}
	fmt.Fprintf(stdout, "ok: %s verified, no faults; %s\n", path, what)
	return exitOK
}
