package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"strings"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// newFlags builds a flag set for a sub-command whose -h output lists every
// flag under a one-line synopsis.
func newFlags(name, synopsis string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet("cleanmon "+name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprintf(stderr, "usage: cleanmon %s %s\n\nflags:\n", name, synopsis)
		fs.PrintDefaults()
	}
	return fs
}

// parseArgs parses flags that may come before or after positional
// arguments (cleanmon certify FILE --format json as well as the reverse).
// It returns the positional arguments.
func parseArgs(fs *flag.FlagSet, args []string) ([]string, error) {
	var pos []string
	for {
		if err := fs.Parse(args); err != nil {
			return nil, err
		}
		rest := fs.Args()
		if len(rest) == 0 {
			return pos, nil
		}
		pos = append(pos, rest[0])
		args = rest[1:]
	}
}

// fail prints a one-line reason prefixed by the command and returns the
// exit status for bad usage or input.
func fail(stderr io.Writer, cmd string, err error) int {
	fmt.Fprintf(stderr, "cleanmon %s: %s\n", cmd, oneLine(err.Error()))
	return exitUsage
}

// exit prints what an offline operation's error says, each line prefixed
// by the command, and maps it to the exit status.
func exit(stderr io.Writer, cmd string, err error) int {
	if err == nil {
		return exitOK
	}
	for _, l := range ops.Lines(err) {
		fmt.Fprintf(stderr, "cleanmon %s: %s\n", cmd, l)
	}
	if errors.Is(err, ops.ErrUsage) {
		return exitUsage
	}
	return exitFail
}

func oneLine(s string) string { return strings.Join(strings.Fields(s), " ") }
