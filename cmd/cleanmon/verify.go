package main

import (
	"errors"
	"fmt"
	"io"

	"cleanmon/store"
)

// runVerify checks a store: bbolt's own consistency check plus the
// store's invariants. Exit 0 when it finds nothing, 1 when it finds a
// fault (every fault is listed), 2 for bad usage.
func runVerify(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("verify", "--data DIR | --file PATH", stderr)
	data := fs.String("data", "", "data directory of the store (the daemon must be stopped)")
	file := fs.String("file", "", "a store file, such as a backup copy")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) > 0 {
		return fail(stderr, "verify", fmt.Errorf("unexpected argument %q", pos[0]))
	}
	if (*data == "") == (*file == "") {
		return fail(stderr, "verify", errors.New("give exactly one of --data or --file"))
	}
	path := *data
	if path == "" {
		path = *file
	}
	problems, err := store.Verify(path)
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
	fmt.Fprintf(stdout, "ok: %s verified, no faults\n", path)
	return exitOK
}
