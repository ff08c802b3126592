package main

import (
	"io"
	"time"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// runBackup copies a store, from a running daemon (--url) or a store no
// daemon holds (--data), and verifies the copy (ops.Backup).
func runBackup(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("backup", "(--data DIR | --url URL [--token-file FILE]) --out FILE", stderr)
	var o ops.BackupOptions
	fs.StringVar(&o.Data, "data", "", "data directory of a store that no daemon holds")
	fs.StringVar(&o.URL, "url", "", "base URL of a running daemon, e.g. http://127.0.0.1:8080")
	fs.StringVar(&o.TokenFile, "token-file", "", "file holding an admin token for --url (else $CLEANMON_TOKEN)")
	fs.StringVar(&o.Out, "out", "", "file to write the copy to")
	fs.DurationVar(&o.Timeout, "timeout", 10*time.Minute, "give up a --url backup after this long")
	var err error
	if o.Args, err = parseArgs(fs, args); err != nil {
		return exitUsage
	}
	return exit(stderr, "backup", ops.Backup(o, stdout))
}
