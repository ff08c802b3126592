package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"sort"
	"strconv"
	"strings"
	"time"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/api"
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
		n, err := strconv.ParseFloat(*target, 64)
		if err == nil {
			err = classify.ValidateClass(n)
		}
		if err != nil {
			return fail(stderr, "recovery", fmt.Errorf("--target-class: %q is not an ISO class 1–9", *target))
		}
		tc = &n
	}
	times, conc, err := recoverySeries(pos[0], sz, *loc, *differential)
	if err != nil {
		return fail(stderr, "recovery", err)
	}
	a, err := api.FitRecovery(times, conc, sz, tc)
	if err != nil {
		return fail(stderr, "recovery", fmt.Errorf("%s: %w", pos[0], err))
	}
	if *format == "json" {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(a); err != nil {
			return exitFail
		}
		return exitOK
	}
	printRecovery(stdout, pos[0], a)
	return exitOK
}

// recoverySeries reads the concentrations at one size of one location of
// a samples file, in time order.
func recoverySeries(name string, size float64, loc string, differential bool) ([]time.Time, []float64, error) {
	data, err := os.ReadFile(name)
	if err != nil {
		return nil, nil, err
	}
	samples, err := collector.ReadSamples(bytes.NewReader(data), collector.SampleFileOptions{Name: name, Sizes: []float64{size}, Differential: differential})
	if err != nil {
		return nil, nil, err
	}
	var picked []classify.Sample
	seen := map[string]bool{}
	for _, s := range samples {
		seen[s.Location] = true
		if loc == "" || strings.EqualFold(s.Location, loc) {
			picked = append(picked, s)
		}
	}
	switch {
	case loc == "" && len(seen) > 1:
		return nil, nil, fmt.Errorf("%s: holds %d locations: a recovery test is of one location; give --location", name, len(seen))
	case len(picked) == 0:
		return nil, nil, fmt.Errorf("%s: no samples of location %q", name, loc)
	}
	for _, s := range picked {
		if s.Time.IsZero() {
			return nil, nil, fmt.Errorf("%s, field time: a recovery test needs the time of every sample", s.Ref)
		}
	}
	sort.SliceStable(picked, func(i, j int) bool { return picked[i].Time.Before(picked[j].Time) })
	times := make([]time.Time, len(picked))
	conc := make([]float64, len(picked))
	for i, s := range picked {
		if i > 0 && !s.Time.After(times[i-1]) {
			return nil, nil, fmt.Errorf("%s, field time: %s repeats an earlier sample's time", s.Ref, s.Time.UTC().Format(time.RFC3339))
		}
		times[i], conc[i] = s.Time, classify.PerCubicMetre(s.Counts[0], s.VolumeL)
	}
	return times, conc, nil
}

func printRecovery(w io.Writer, name string, a api.RecoveryAnswer) {
	fmt.Fprintf(w, "Recovery test (ISO 14644-3) of %s at ≥%s µm\n", name, a.SizeUM)
	fmt.Fprintf(w, "  recovery rate               %.4f /min\n", a.RatePerMin)
	fmt.Fprintf(w, "  100:1 recovery time         %.2f min (ln 100 / rate)\n", a.T100Min)
	fmt.Fprintf(w, "  fit quality R²              %.4f\n", a.RSquared)
	fmt.Fprintf(w, "  points used                 %d, from %.2f to %.2f min after %s\n", a.Points, a.FromMin, a.ToMin, a.Start.Format(time.RFC3339))
	fmt.Fprintf(w, "  fitted at the first point    %s /m³ (%s /m³ extrapolated to 0 min)\n",
		strconv.FormatFloat(a.C0PerM3*math.Exp(-a.RatePerMin*a.FromMin), 'f', 0, 64), strconv.FormatFloat(a.C0PerM3, 'f', 0, 64))
	if a.TargetClass != nil {
		fmt.Fprintf(w, "  floor                       %s /m³ (ISO %s limit at ≥%s µm): later points left out\n",
			strconv.FormatFloat(a.FloorPerM3, 'f', -1, 64), classify.FormatClass(*a.TargetClass), a.SizeUM)
	}
	fmt.Fprintf(w, "  %-8s  %12s  %s\n", "minute", "/m³", "used")
	for _, p := range a.Series {
		used := "no"
		if p.Used {
			used = "yes"
		}
		fmt.Fprintf(w, "  %8.2f  %12.0f  %s\n", p.Minute, p.PerM3, used)
	}
}
