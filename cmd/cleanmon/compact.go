package main

import (
	"io"
	"time"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// runCompact rewrites a stopped store without its free pages. Exit 0 when
// done, 1 when refused (store open, or not stopped cleanly) or failed, 2
// for bad usage.
func runCompact(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("compact", "--data DIR", stderr)
	data := fs.String("data", "", "data directory of the store (the daemon must be stopped cleanly)")
	wait := fs.Duration("wait", 5*time.Second, "how long to wait for a process holding the store to let go")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	return exit(stderr, "compact", ops.Compact(*data, *wait, pos, stdout))
}
