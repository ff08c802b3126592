package main

import (
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
)

// errUsage marks an error already explained to the user.
var errUsage = errors.New("usage")

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

func oneLine(s string) string { return strings.Join(strings.Fields(s), " ") }

// writeOutput writes the output to the named file atomically (a temporary
// file in the same directory, synced, then renamed) so a reader never sees
// half a report, or to stdout when name is empty.
func writeOutput(name string, stdout io.Writer, write func(io.Writer) error) error {
	if name == "" || name == "-" {
		return write(stdout)
	}
	dir := filepath.Dir(name)
	f, err := os.CreateTemp(dir, "."+filepath.Base(name)+".tmp-*")
	if err != nil {
		return err
	}
	tmp := f.Name()
	defer os.Remove(tmp)
	if err := write(f); err != nil {
		f.Close()
		return err
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	return os.Rename(tmp, name)
}

// printJSON writes v as indented JSON, the form of every --json output.
func printJSON(w io.Writer, v any) int {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(v); err != nil {
		return exitFail
	}
	return exitOK
}
