package ops

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

// RunsImport posts a runs CSV (columns id, zone, start, end, product,
// lot) to a running daemon at base, all or none. args are the positional
// arguments: the one file.
func RunsImport(base, tokenFile string, args []string, stdout io.Writer) error {
	switch {
	case len(args) != 1:
		return usage(errors.New("give one CSV file"))
	case base == "":
		return usage(errors.New("--url is required"))
	}
	body, err := os.ReadFile(args[0])
	if err != nil {
		return usage(err)
	}
	token, err := readToken(tokenFile)
	if err != nil {
		return usage(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, strings.TrimRight(base, "/")+"/api/v1/runs", strings.NewReader(string(body)))
	if err != nil {
		return usage(err)
	}
	req.Header.Set("Content-Type", "text/csv")
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return fault(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(io.LimitReader(resp.Body, 1<<20))
	if resp.StatusCode != http.StatusOK {
		// The daemon names the line and column; the file's name is ours.
		line := args[0] + ": " + oneLine(strings.Replace(string(b), `"body:`, `"`, 1))
		bad := resp.StatusCode == http.StatusBadRequest || resp.StatusCode == http.StatusConflict
		return &Error{Lines: []string{line}, Usage: bad}
	}
	fmt.Fprintf(stdout, "cleanmon runs import: %s\n", oneLine(string(b)))
	return nil
}
