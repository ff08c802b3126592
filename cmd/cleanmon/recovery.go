package main

import (
	"bytes"
	"fmt"
	"io"
	"os"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/collector"
)

func runRecovery(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("recovery", "[--size UM] [--target-class N] [--location ID] [--differential] [--format text|json] SAMPLES.csv", stderr)
	size := fs.String("size", "0.5", "threshold size in µm whose concentration is fitted")
	target := fs.String("target-class", "", "ISO class the zone is held to: the fit stops before the first point at or below its limit at --size")
	loc := fs.String("location", "", "the location to fit, when the file holds more than one")
	differential := fs.Bool("differential", false, "counts in the file are per channel (this size up to the next), not cumulative")
	format := fs.String("format", "text", "output: text or json")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) != 1 {
		return fail(stderr, "recovery", fmt.Errorf("give exactly one samples file (got %d)", len(pos)))
	}
	if *format != "text" && *format != "json" {
		return fail(stderr, "recovery", fmt.Errorf("--format: %q (want text or json)", *format))
	}
	sz, err := classify.ParseSize(*size)
	if err != nil {
		return fail(stderr, "recovery", fmt.Errorf("--size: %w", err))
	}
	var tc *float64
	if *target != "" {
		n, err := parseClass("--target-class", *target)
		if err != nil {
			return fail(stderr, "recovery", err)
		}
		tc = &n
	}
	a, err := recoveryTest(pos[0], sz, *loc, *differential, tc)
	if err != nil {
		return fail(stderr, "recovery", err)
	}
	if *format == "json" {
		return printJSON(stdout, a)
	}
	if err := report.WriteRecovery(stdout, pos[0], a); err != nil {
		return exitFail
	}
	return exitOK
}

// recoveryTest reads one location of a samples file and fits its decay
// at one size.
func recoveryTest(name string, size float64, loc string, differential bool, tc *float64) (classify.RecoveryTest, error) {
	data, err := os.ReadFile(name)
	if err != nil {
		return classify.RecoveryTest{}, err
	}
	samples, err := collector.ReadSamples(bytes.NewReader(data), collector.SampleFileOptions{Name: name, Sizes: []float64{size}, Differential: differential})
	if err != nil {
		return classify.RecoveryTest{}, err
	}
	times, conc, err := classify.RecoverySeries(samples, loc)
	if err == nil {
		var a classify.RecoveryTest
		if a, err = classify.FitRecoveryTest(times, conc, size, tc); err == nil {
			return a, nil
		}
	}
	return classify.RecoveryTest{}, fmt.Errorf("%s: %w", name, err)
}
