package ops

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
)

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

// printJSON writes v as indented JSON, the form of every --json output; a
// failed write has nothing more to say.
func printJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(v); err != nil {
		return silent(err)
	}
	return nil
}
