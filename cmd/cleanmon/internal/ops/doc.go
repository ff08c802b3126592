// Package ops does the work of cleanmon's offline sub-commands, the part
// beyond their flags: backup (of a stopped store, or over a running
// daemon's API) and the check of the copy, verify, compact, keygen, the
// account changes of `user`, `runs import`, the month trend report (from
// a daemon or a stopped store), certify, recovery, plan and limits.
//
// package main parses the flags into these options, calls one function
// and prints what the returned error says (Lines) after the command's
// name; ErrUsage tells bad usage or input (exit 2) from a fault (exit 1).
// Only cmd/cleanmon imports this package.
package ops

import (
	"errors"
	"strings"
)

// ErrUsage marks bad usage or bad input, which scripts tell from a fault
// (or a failing zone) by the exit status.
var ErrUsage = errors.New("bad usage or input")

// Error is a failure as the command prints it: each of Lines goes to
// standard error after "cleanmon <command>: " (none for a failure already
// told, such as a failed write to standard output).
type Error struct {
	Lines []string
	Usage bool  // bad usage or input, see ErrUsage
	Err   error // the cause
}

// Error gives the lines joined, for logs and tests.
func (e *Error) Error() string { return strings.Join(e.Lines, "; ") }

// Unwrap gives the cause, so callers can test for a store's errors.
func (e *Error) Unwrap() error { return e.Err }

// Is makes a usage error match ErrUsage.
func (e *Error) Is(target error) bool { return e.Usage && target == ErrUsage }

// Lines are what err says, one printed line each.
func Lines(err error) []string {
	var e *Error
	if errors.As(err, &e) {
		return e.Lines
	}
	return []string{err.Error()}
}

// usage is bad usage or input, on one line.
func usage(err error) error {
	return &Error{Lines: []string{oneLine(err.Error())}, Usage: true, Err: err}
}

// fault is a failure of the operation on one line, with any hints on
// further lines.
func fault(err error, hints ...string) error {
	return &Error{Lines: append([]string{oneLine(err.Error())}, hints...), Err: err}
}

// silent is a failure that prints nothing more.
func silent(err error) error { return &Error{Err: err} }

func oneLine(s string) string { return strings.Join(strings.Fields(s), " ") }
