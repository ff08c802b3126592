package main

import (
	"errors"
	"fmt"
	"io"
	"time"

	"cleanmon/cmd/cleanmon/internal/loadtest"
)

// runSoak runs the real daemon on loopback under ingest and queries at
// once for a bounded time, reports every error (there must be none),
// throughput and the daemon's RSS as it goes, then stops it and verifies
// the store it wrote.
func runSoak(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("soak", "[--duration 10m] [--rate 10000] [--counters 200] [--batch 100] [--every 30s]", stderr)
	var o loadtest.SoakOptions
	fs.DurationVar(&o.Duration, "duration", 10*time.Minute, "how long to run (the soak stops by itself)")
	fs.IntVar(&o.Rate, "rate", 10000, "readings per second to post")
	fs.IntVar(&o.Counters, "counters", 200, "counters configured and fed")
	fs.IntVar(&o.Batch, "batch", 100, "readings per NDJSON request")
	fs.DurationVar(&o.Every, "every", 30*time.Second, "how often to print a progress line")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	switch {
	case len(pos) > 0:
		return fail(stderr, "soak", fmt.Errorf("unexpected argument %q", pos[0]))
	case o.Duration <= 0 || o.Duration > 24*time.Hour:
		return fail(stderr, "soak", errors.New("--duration: more than 0, at most 24h"))
	case o.Rate < 1 || o.Counters < 2 || o.Batch < 1 || o.Every <= 0:
		return fail(stderr, "soak", errors.New("--rate, --batch ≥ 1, --counters ≥ 2, --every > 0"))
	}
	failures, err := loadtest.Soak(o, stdout)
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon soak: %s\n", oneLine(err.Error()))
		return exitFail
	}
	if failures > 0 {
		return exitFail
	}
	return exitOK
}
