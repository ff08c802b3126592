package main

import (
	"io"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// runPlan prints a zone's sampling plan (ops.Plan).
func runPlan(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("plan", "--class N (--area M2 | --length L --width W) --sizes LIST [--edition 2015|1999] [--flow LPM] [--json]   (or --grade A|B|C|D --state …)", stderr)
	var o ops.PlanOptions
	registerTarget(fs, &o.Target, true)
	fs.Float64Var(&o.Length, "length", 0, "zone length in m: with --width, gives the area and each location's coordinates")
	fs.Float64Var(&o.Width, "width", 0, "zone width in m (with --length)")
	fs.BoolVar(&o.JSON, "json", false, "print JSON")
	var err error
	if o.Args, err = parseArgs(fs, args); err != nil {
		return exitUsage
	}
	return exit(stderr, "plan", ops.Plan(o, stdout))
}
