package store

import (
	"errors"
	"fmt"
	"strings"
	"syscall"

	bolt "go.etcd.io/bbolt"
	berrors "go.etcd.io/bbolt/errors"
)

// Errors returned by the store, wrapped with detail; test with errors.Is.
var (
	// ErrLocked: another process (usually a second daemon on the same data
	// directory) holds the database file.
	ErrLocked = errors.New("store: database file is locked")
	// ErrClosed: the Store was closed.
	ErrClosed = errors.New("store: closed")
	// ErrCorrupt: the file or a value in it is damaged.
	ErrCorrupt = errors.New("store: database file is damaged")
	// ErrDiskFull: a commit ran out of space (ENOSPC, quota, or
	// Options.MaxBytes). Nothing of the failed call was stored; the store
	// stays usable for reads and for later writes once space is freed.
	ErrDiskFull = errors.New("store: disk full")
	// ErrInvalid: a record or an argument was rejected before anything was
	// written. Records are reported as a *RecordError.
	ErrInvalid = errors.New("store: invalid input")
	// ErrSchema: the file was written by a newer version of the program.
	ErrSchema = errors.New("store: unsupported schema version")
	// ErrNotFound: the record named by an ID (an outbox item) is not in
	// the store.
	ErrNotFound = errors.New("store: not found")
)

// RecordError reports the first bad record of a write call: the index in
// the slice given, the field, and why. Nothing of the call was stored.
// It matches ErrInvalid under errors.Is.
type RecordError struct {
	Kind   string // "reading", "pressure", "operating state", "alarm record", "notifier", "audit entry"
	Index  int    // position in the slice passed to the call
	Field  string // field name as in the Go struct, e.g. "Counts"
	Reason string
}

// Error names the record, field and reason.
func (e *RecordError) Error() string {
	return fmt.Sprintf("store: invalid %s at index %d: %s: %s", e.Kind, e.Index, e.Field, e.Reason)
}

// Unwrap makes a RecordError match ErrInvalid.
func (e *RecordError) Unwrap() error { return ErrInvalid }

// isDiskFull recognises the ways bbolt reports lack of space. The file
// growth path formats the OS error with %s, so the text is checked too.
func isDiskFull(err error) bool {
	if errors.Is(err, syscall.ENOSPC) || errors.Is(err, syscall.EDQUOT) || errors.Is(err, berrors.ErrMaxSizeReached) {
		return true
	}
	msg := err.Error()
	return strings.Contains(msg, "no space left on device") || strings.Contains(msg, "disk quota exceeded")
}

// commitError gives a failed write transaction its store meaning.
func commitError(err error) error {
	switch {
	case err == nil:
		return nil
	case errors.Is(err, ErrDiskFull), errors.Is(err, ErrCorrupt), errors.Is(err, ErrInvalid), errors.Is(err, ErrClosed), errors.Is(err, ErrNotFound):
		return err
	case isDiskFull(err):
		return fmt.Errorf("%w: nothing of this call was stored: %w", ErrDiskFull, err)
	case errors.Is(err, bolt.ErrDatabaseNotOpen):
		return fmt.Errorf("%w: %w", ErrClosed, err)
	}
	return fmt.Errorf("store: commit failed, nothing of this call was stored: %w", err)
}

// corruptHint is appended to every ErrCorrupt that names a file, so an
// operator knows what to do next.
func corruptHint(path string) string {
	return fmt.Sprintf("run `cleanmon verify %s` for a full report and restore the latest backup", path)
}
