package main

import (
	"fmt"
	"io"
	"time"

	"cleanmon/store"
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
	if len(pos) > 0 || *data == "" {
		return fail(stderr, "compact", fmt.Errorf("give --data DIR and nothing else"))
	}
	res, err := store.CompactFile(*data, *wait)
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon compact: %s\n", oneLine(err.Error()))
		return exitFail
	}
	fmt.Fprintf(stdout, "ok: %s compacted, %.1f MB → %.1f MB on disk in %s\n", *data,
		float64(res.Before)/1e6, float64(res.After)/1e6, res.Took.Round(time.Millisecond))
	return exitOK
}
