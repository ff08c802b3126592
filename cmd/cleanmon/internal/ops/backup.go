package ops

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"path/filepath"
	"strings"
	"time"

	"cleanmon/store"
)

// BackupOptions are the flags of `cleanmon backup`.
type BackupOptions struct {
	Data      string        // data directory of a store no daemon holds
	URL       string        // or the base URL of a running daemon
	TokenFile string        // admin token for URL (else $CLEANMON_TOKEN)
	Out       string        // the copy
	Timeout   time.Duration // of a backup over URL
	Args      []string      // positional arguments: none are taken
}

// Backup copies a store. With URL it asks a running daemon for an online
// snapshot (GET /api/v1/backup, admin token); with Data it opens the store
// directly, which only works while no daemon holds it. Either way the copy
// is verified before success is reported, and it is written atomically so
// a failed run leaves no half file at Out.
func Backup(o BackupOptions, stdout io.Writer) error {
	switch {
	case len(o.Args) > 0:
		return usage(fmt.Errorf("unexpected argument %q", o.Args[0]))
	case o.Out == "":
		return usage(errors.New("--out is required"))
	case (o.Data == "") == (o.URL == ""):
		return usage(errors.New("give exactly one of --data or --url"))
	}
	var n int64
	if o.Data != "" {
		st, err := store.Open(o.Data, store.Options{})
		if err != nil {
			if errors.Is(err, store.ErrLocked) {
				return fault(err, "a daemon holds this store; use --url to back it up online")
			}
			return fault(err)
		}
		n, err = st.BackupFile(o.Out)
		if cerr := st.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			return fault(err)
		}
	} else {
		token, err := readToken(o.TokenFile)
		if err != nil {
			return usage(err)
		}
		ctx, cancel := context.WithTimeout(context.Background(), o.Timeout)
		defer cancel()
		n, err = fetchBackup(ctx, strings.TrimRight(o.URL, "/")+"/api/v1/backup", token, o.Out)
		if err != nil {
			return fault(err)
		}
	}
	problems, err := store.Verify(o.Out)
	if err != nil || len(problems) > 0 {
		line := fmt.Sprintf("the copy at %s does not verify: %v %s", o.Out, err, strings.Join(problems, "; "))
		return &Error{Lines: []string{line}, Err: err}
	}
	fmt.Fprintf(stdout, "cleanmon backup: %d bytes written to %s and verified\n", n, o.Out)
	return nil
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
