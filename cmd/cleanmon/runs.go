package main

import (
	"fmt"
	"io"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// runRuns dispatches `cleanmon runs import FILE --url URL` (ops.RunsImport).
func runRuns(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] != "import" {
		if len(args) > 0 && (args[0] == "-h" || args[0] == "--help") {
			fmt.Fprintln(stdout, "usage: cleanmon runs import --url URL [--token-file FILE] RUNS.csv")
			return exitOK
		}
		fmt.Fprintln(stderr, "cleanmon runs: want `cleanmon runs import ...` (see cleanmon runs import -h)")
		return exitUsage
	}
	fs := newFlags("runs import", "--url URL [--token-file FILE] RUNS.csv", stderr)
	base := fs.String("url", "", "base URL of a running daemon, e.g. http://127.0.0.1:8080")
	tokenFile := fs.String("token-file", "", "file holding an operator or ingest token (else $CLEANMON_TOKEN)")
	pos, err := parseArgs(fs, args[1:])
	if err != nil {
		return exitUsage
	}
	return exit(stderr, "runs import", ops.RunsImport(*base, *tokenFile, pos, stdout))
}
