package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"time"

	"cleanmon/store"
)

// runBackup copies a store. With --url it asks a running daemon for an
// online snapshot (GET /api/v1/backup, admin token); with --data it opens
// the store directly, which only works while no daemon holds it. Either
// way the copy is verified before the command reports success, and it is
// written atomically so a failed run leaves no half file under --out.
func runBackup(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("backup", "(--data DIR | --url URL [--token-file FILE]) --out FILE", stderr)
	data := fs.String("data", "", "data directory of a store that no daemon holds")
	url := fs.String("url", "", "base URL of a running daemon, e.g. http://127.0.0.1:8080")
	tokenFile := fs.String("token-file", "", "file holding an admin token for --url (else $CLEANMON_TOKEN)")
	out := fs.String("out", "", "file to write the copy to")
	timeout := fs.Duration("timeout", 10*time.Minute, "give up a --url backup after this long")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	switch {
	case len(pos) > 0:
		return fail(stderr, "backup", fmt.Errorf("unexpected argument %q", pos[0]))
	case *out == "":
		return fail(stderr, "backup", errors.New("--out is required"))
	case (*data == "") == (*url == ""):
		return fail(stderr, "backup", errors.New("give exactly one of --data or --url"))
	}
	var n int64
	if *data != "" {
		st, err := store.Open(*data, store.Options{})
		if err != nil {
			fmt.Fprintf(stderr, "cleanmon backup: %s\n", oneLine(err.Error()))
			if errors.Is(err, store.ErrLocked) {
				fmt.Fprintln(stderr, "cleanmon backup: a daemon holds this store; use --url to back it up online")
			}
			return exitFail
		}
		n, err = st.BackupFile(*out)
		if cerr := st.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			fmt.Fprintf(stderr, "cleanmon backup: %s\n", oneLine(err.Error()))
			return exitFail
		}
	} else {
		token, err := readToken(*tokenFile)
		if err != nil {
			return fail(stderr, "backup", err)
		}
		ctx, cancel := context.WithTimeout(context.Background(), *timeout)
		defer cancel()
		n, err = fetchBackup(ctx, strings.TrimRight(*url, "/")+"/api/v1/backup", token, *out)
		if err != nil {
			fmt.Fprintf(stderr, "cleanmon backup: %s\n", oneLine(err.Error()))
			return exitFail
		}
	}
	problems, err := store.Verify(*out)
	if err != nil || len(problems) > 0 {
		fmt.Fprintf(stderr, "cleanmon backup: the copy at %s does not verify: %v %s\n", *out, err, strings.Join(problems, "; "))
		return exitFail
	}
	fmt.Fprintf(stdout, "cleanmon backup: %d bytes written to %s and verified\n", n, *out)
	return exitOK
}

// readToken reads a bearer token from a file (trimmed) or the
// CLEANMON_TOKEN environment variable; a token is never a flag value, so
// it does not show in process listings.
func readToken(file string) (string, error) {
	if file == "" {
		return os.Getenv("CLEANMON_TOKEN"), nil
	}
	b, err := os.ReadFile(file)
	if err != nil {
		return "", fmt.Errorf("--token-file: %w", err)
	}
	return strings.TrimSpace(string(b)), nil
}

func fetchBackup(ctx context.Context, url, token, out string) (int64, error) {
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
	if err != nil {
		return 0, err
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return 0, err
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		msg, _ := io.ReadAll(io.LimitReader(resp.Body, 512))
		return 0, fmt.Errorf("%s: %s %s", url, resp.Status, strings.TrimSpace(string(msg)))
	}
	var n int64
	err = writeOutput(out, nil, func(w io.Writer) error {
		var err error
		n, err = io.Copy(w, resp.Body)
		return err
	})
	if err != nil {
		return n, fmt.Errorf("writing %s: %w", filepath.Clean(out), err)
	}
	return n, nil
}
