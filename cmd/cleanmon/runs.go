package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"os"
	"strings"
	"time"
)

// runRuns dispatches `cleanmon runs import FILE --url URL`: a runs CSV
// (columns id, zone, start, end, product, lot) posted to a running daemon,
// all or none.
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
	switch {
	case len(pos) != 1:
		return fail(stderr, "runs import", errors.New("give one CSV file"))
	case *base == "":
		return fail(stderr, "runs import", errors.New("--url is required"))
	}
	body, err := os.ReadFile(pos[0])
	if err != nil {
		return fail(stderr, "runs import", err)
	}
	token, err := readToken(*tokenFile)
	if err != nil {
		return fail(stderr, "runs import", err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, strings.TrimRight(*base, "/")+"/api/v1/runs", strings.NewReader(string(body)))
	if err != nil {
		return fail(stderr, "runs import", err)
	}
	req.Header.Set("Content-Type", "text/csv")
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon runs import: %s\n", oneLine(err.Error()))
		return exitFail
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(io.LimitReader(resp.Body, 1<<20))
	if resp.StatusCode != http.StatusOK {
		// The daemon names the line and column; the file's name is ours.
		fmt.Fprintf(stderr, "cleanmon runs import: %s: %s\n", pos[0], oneLine(strings.Replace(string(b), `"body:`, `"`, 1)))
		if resp.StatusCode == http.StatusBadRequest || resp.StatusCode == http.StatusConflict {
			return exitUsage
		}
		return exitFail
	}
	fmt.Fprintf(stdout, "cleanmon runs import: %s\n", oneLine(string(b)))
	return exitOK
}
