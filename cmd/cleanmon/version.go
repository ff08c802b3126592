package main

import (
	"flag"
	"fmt"
	"io"

	"cleanmon/cmd/cleanmon/internal/daemon"
)

// runVersion is `cleanmon version`: the version, revision and Go version
// of this binary, one line.
func runVersion(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("version", flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprintln(fs.Output(), "usage: cleanmon version")
		fmt.Fprintln(fs.Output(), "Prints the version and VCS revision stamped at build time (or recorded by Go), and the Go version.")
	}
	if err := fs.Parse(args); err != nil {
		if err == flag.ErrHelp {
			return exitOK
		}
		return exitUsage
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(stderr, "cleanmon version: unexpected argument %q\n", fs.Arg(0))
		return exitUsage
	}
	b := daemon.BuildInfo()
	fmt.Fprintf(stdout, "cleanmon %s (revision %s, %s)\n", b.Version, b.Revision, b.GoVersion)
	return exitOK
}
