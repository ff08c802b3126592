package store

import (
	"errors"
	"fmt"
	"time"
)

// DefaultMaxRawRange is the longest range of raw readings one request
// should ask for: a year of one location streams in well under a second
// (see BenchmarkScanReadingsYear), so a leap year plus a day is allowed.
const DefaultMaxRawRange = 367 * 24 * time.Hour

// ErrRange: a query's range is refused. Always a *RangeError, which also
// matches ErrInvalid.
var ErrRange = errors.New("store: query range refused")

// RangeError names the query parameter ("from" or "to") that makes a
// range unacceptable, and why; the API answers it with 400.
type RangeError struct {
	Param  string
	Reason string
}

// Error names the parameter and the reason.
func (e *RangeError) Error() string {
	return fmt.Sprintf("store: query range: %s: %s", e.Param, e.Reason)
}

// Unwrap makes a RangeError match ErrRange and ErrInvalid.
func (e *RangeError) Unwrap() []error { return []error{ErrRange, ErrInvalid} }

// CheckRange checks a query range [from, to) against a limit on its
// length (max ≤ 0: no limit, and then a zero bound means unbounded). The
// store's scans seek to from and stop at to, so an empty stretch costs
// nothing; the limit bounds what a single request can make the daemon
// stream.
func CheckRange(from, to time.Time, max time.Duration) error {
	if max > 0 {
		switch {
		case from.IsZero():
			return &RangeError{Param: "from", Reason: fmt.Sprintf("required (a range is at most %s)", max)}
		case to.IsZero():
			return &RangeError{Param: "to", Reason: fmt.Sprintf("required (a range is at most %s)", max)}
		}
	}
	if !from.IsZero() && !to.IsZero() && !to.After(from) {
		return &RangeError{Param: "to", Reason: fmt.Sprintf("%s is not after from %s", to.UTC().Format(time.RFC3339Nano), from.UTC().Format(time.RFC3339Nano))}
	}
	if max > 0 && to.Sub(from) > max {
		return &RangeError{Param: "to", Reason: fmt.Sprintf("the range from %s to %s is longer than the limit of %s", from.UTC().Format(time.RFC3339), to.UTC().Format(time.RFC3339), max)}
	}
	return nil
}
