package main

import (
	"errors"
	"fmt"
	"io"
	"time"

	"cleanmon/cmd/cleanmon/internal/loadtest"
)

// runBench measures the real daemon (this very binary, started as
// `cleanmon serve` on loopback) on the site shape: durable ingest of the
// live shape, bytes on disk after a clean stop, verify, a location's year
// posted as a catch-up backlog and queried raw and hourly; with --peers,
// InfluxDB and VictoriaMetrics on the same readings in the same run.
// --latency runs the older phase-timed measurement instead (throughput,
// single-reading acknowledgement latency, a bare bbolt baseline).
func runBench(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("bench", "[--counters N] [--minutes N] [--year-minutes N] [--batch N] [--writers N] [--peers] | --latency [--phase 10s] [--rate 500] [--run N]", stderr)
	var o loadtest.BenchOptions
	var so loadtest.ShapeOptions
	fs.IntVar(&o.Counters, "counters", 200, "counters of the live shape, each sending a reading a minute")
	fs.IntVar(&so.Minutes, "minutes", 5000, "minutes of the live shape (200 counters × 5000 = 1 million readings)")
	fs.IntVar(&so.YearMinutes, "year-minutes", 525600, "readings of the one location's year (0: no year phase)")
	fs.IntVar(&o.Batch, "batch", 1000, "readings per NDJSON request")
	fs.IntVar(&o.Writers, "writers", 4, "concurrent HTTP writers")
	fs.BoolVar(&so.Peers, "peers", false, "also run InfluxDB (influxd) and VictoriaMetrics on the same readings and print the ratios")
	latency := fs.Bool("latency", false, "run the phase-timed measurement instead: throughput for --phase, then single readings at --rate")
	fs.IntVar(&o.Run, "run", 20, "with --latency: consecutive samples of one counter in a batch")
	fs.IntVar(&o.Rate, "rate", 500, "with --latency: single-reading requests per second")
	fs.DurationVar(&o.Phase, "phase", 10*time.Second, "with --latency: length of the throughput and latency phases")
	fs.BoolVar(&o.History, "history", true, "load one location's year and time the range queries (false is --year-minutes 0)")
	fs.BoolVar(&o.Keep, "keep", false, "keep the temporary data directory")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) > 0 {
		return fail(stderr, "bench", fmt.Errorf("unexpected argument %q", pos[0]))
	}
	if o.Counters < 2 || o.Batch < 1 || o.Writers < 1 || o.Rate < 1 || o.Phase <= 0 || o.Run < 1 || so.Minutes < 1 || so.YearMinutes < 0 {
		return fail(stderr, "bench", errors.New("--counters ≥ 2, --batch, --writers, --rate, --run, --minutes ≥ 1, --year-minutes ≥ 0 and --phase > 0"))
	}
	if *latency {
		err = loadtest.Bench(o, stdout, stderr)
	} else {
		so.Counters, so.Batch, so.Writers, so.Keep = o.Counters, o.Batch, o.Writers, o.Keep
		if !o.History {
			so.YearMinutes = 0
		}
		_, err = loadtest.Shape(so, stdout, stderr)
	}
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon bench: %s\n", oneLine(err.Error()))
		return exitFail
	}
	return exitOK
}
