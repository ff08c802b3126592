package main

import (
	"io"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/ops"
)

// runLimits prints class or grade limits (ops.Limits).
func runLimits(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("limits", "--class N [--sizes LIST] [--edition 2015|1999] [--json] | --grade A|B|C|D --state at-rest|in-operation [--use classification|monitoring] [--json]", stderr)
	var o ops.LimitsOptions
	registerTarget(fs, &o.Target, false)
	fs.StringVar(&o.Use, "use", string(classify.GMPClassification), "grade table: classification or monitoring")
	fs.BoolVar(&o.JSON, "json", false, "print JSON")
	fs.BoolVar(&o.FED, "fed-std", false, "show the FED-STD-209E class the ISO class matches (alone: the table of ISO classes beside the old classes)")
	fs.StringVar(&o.Macro, "macro", "", `macroparticle descriptor to print with the limits, e.g. "M(10000; >5 µm); time-of-flight spectrometer" (ISO 14644-1:2015 Annex C)`)
	var err error
	if o.Args, err = parseArgs(fs, args); err != nil {
		return exitUsage
	}
	return exit(stderr, "limits", ops.Limits(o, stdout))
}
