package main

import (
	"io"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// runRecovery fits the recovery after a particle challenge (ops.Recovery).
func runRecovery(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("recovery", "[--size UM] [--target-class N] [--location ID] [--differential] [--format text|json] SAMPLES.csv", stderr)
	var o ops.RecoveryOptions
	fs.StringVar(&o.Size, "size", "0.5", "threshold size in µm whose concentration is fitted")
	fs.StringVar(&o.TargetClass, "target-class", "", "ISO class the zone is held to: the fit stops before the first point at or below its limit at --size")
	fs.StringVar(&o.Location, "location", "", "the location to fit, when the file holds more than one")
	fs.BoolVar(&o.Differential, "differential", false, "counts in the file are per channel (this size up to the next), not cumulative")
	fs.StringVar(&o.Format, "format", "text", "output: text or json")
	var err error
	if o.Args, err = parseArgs(fs, args); err != nil {
		return exitUsage
	}
	return exit(stderr, "recovery", ops.Recovery(o, stdout))
}
