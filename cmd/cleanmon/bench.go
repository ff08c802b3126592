package main

import (
	"errors"
	"fmt"
	"io"
	"time"

	"cleanmon/cmd/cleanmon/internal/loadtest"
)

// runBench measures the real daemon: it starts `cleanmon serve` (this very
// binary) on loopback with a generated site of N counters, drives ingest
// and queries over HTTP, and writes the same records straight into a bare
// bbolt file with the same batching as a baseline. It prints throughput,
// acknowledgement latency, query times and the server's peak RSS.
func runBench(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("bench", "[--counters N] [--batch N] [--writers N] [--phase 10s] [--rate 500] [--history=false]", stderr)
	var o loadtest.BenchOptions
	fs.IntVar(&o.Counters, "counters", 2000, "simulated counters configured and fed")
	fs.IntVar(&o.Batch, "batch", 1000, "readings per NDJSON request in the throughput phase")
	fs.IntVar(&o.Run, "run", 20, "consecutive samples of one counter in a batch: 20 is a gateway catching up after an outage (1000-reading batches over 50 counters); 1 spreads every batch over all counters, the store's worst case")
	fs.IntVar(&o.Writers, "writers", 4, "concurrent HTTP writers in the throughput phase")
	fs.IntVar(&o.Rate, "rate", 500, "single-reading requests per second in the latency phase")
	fs.DurationVar(&o.Phase, "phase", 10*time.Second, "length of the throughput and latency phases")
	fs.BoolVar(&o.History, "history", true, "load one location's year of per-minute readings and time the range queries")
	fs.BoolVar(&o.Keep, "keep", false, "keep the temporary data directory")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) > 0 {
		return fail(stderr, "bench", fmt.Errorf("unexpected argument %q", pos[0]))
	}
	if o.Counters < 2 || o.Batch < 1 || o.Writers < 1 || o.Rate < 1 || o.Phase <= 0 || o.Run < 1 {
		return fail(stderr, "bench", errors.New("--counters ≥ 2, --batch, --writers, --rate, --run ≥ 1 and --phase > 0"))
	}
	if err := loadtest.Bench(o, stdout, stderr); err != nil {
		fmt.Fprintf(stderr, "cleanmon bench: %s\n", oneLine(err.Error()))
		return exitFail
	}
	return exitOK
}
