package ops

import (
	"errors"
	"io"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// The contract with package main: the lines to print after the command's
// name, and bad usage (exit 2) told from a fault (exit 1).
func TestErrorLinesAndUsage(t *testing.T) {
	missing := filepath.Join(t.TempDir(), "none")
	for _, tc := range []struct {
		name  string
		err   error
		lines []string
		usage bool
	}{
		{"compact without --data", Compact("", 0, nil, io.Discard), []string{"give --data DIR and nothing else"}, true},
		{"compact a directory without a store", Compact(missing, 0, nil, io.Discard), nil, true},
		{"keygen extra argument", Keygen("k", []string{"x"}, io.Discard), []string{`unexpected argument "x"`}, true},
		{"verify two stores", Verify(VerifyOptions{Paths: []string{"a", "b"}}, io.Discard),
			[]string{"name exactly one store: --data DIR, --file PATH, or a data directory or database file as the argument"}, true},
		{"backup without --out", Backup(BackupOptions{Data: "d"}, io.Discard), []string{"--out is required"}, true},
		{"trend bad month", Trend(TrendOptions{Zone: "z", URL: "http://127.0.0.1:1", Format: "text", Month: "March"}, io.Discard),
			[]string{`--month: "March" is not a month such as 2026-03`}, true},
		{"runs missing file", RunsImport("http://127.0.0.1:1", "", []string{missing}, io.Discard), nil, true},
		{"plan bad class", Plan(PlanOptions{Target: TargetSpec{Class: "10", Sizes: "0.5", Area: 1}}, io.Discard), nil, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if tc.err == nil {
				t.Fatal("no error")
			}
			lines := Lines(tc.err)
			if tc.lines != nil && !reflect.DeepEqual(lines, tc.lines) {
				t.Errorf("lines %q, want %q", lines, tc.lines)
			}
			for _, l := range lines {
				if l == "" || strings.Contains(l, "\n") {
					t.Errorf("line %q: want one non-empty line", l)
				}
			}
			if got := errors.Is(tc.err, ErrUsage); got != tc.usage {
				t.Errorf("usage %v, want %v", got, tc.usage)
			}
		})
	}
}

// A fault found by verify is an error, not bad usage, and keeps its cause.
func TestVerifyMissingStoreIsAFault(t *testing.T) {
	err := Verify(VerifyOptions{Paths: []string{filepath.Join(t.TempDir(), "none.db")}}, io.Discard)
	if err == nil || errors.Is(err, ErrUsage) {
		t.Fatalf("err %v: want a fault", err)
	}
	if errors.Unwrap(err) == nil {
		t.Errorf("err %v lost its cause", err)
	}
}
