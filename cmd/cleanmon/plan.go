package main

import (
	"fmt"
	"io"
	"math"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
)

func runPlan(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("plan", "--class N (--area M2 | --length L --width W) --sizes LIST [--edition 2015|1999] [--flow LPM] [--json]   (or --grade A|B|C|D --state …)", stderr)
	var tf targetFlags
	tf.register(fs, "", true)
	length := fs.Float64("length", 0, "zone length in m: with --width, gives the area and each location's coordinates")
	width := fs.Float64("width", 0, "zone width in m (with --length)")
	asJSON := fs.Bool("json", false, "print JSON")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) > 0 {
		return fail(stderr, "plan", fmt.Errorf("unexpected argument %q", pos[0]))
	}
	out, t, err := makePlan(&tf, *length, *width)
	if err != nil {
		return fail(stderr, "plan", err)
	}
	if *asJSON {
		return printJSON(stdout, out)
	}
	report.WritePlan(stdout, t, out)
	return exitOK
}

// makePlan checks the flags and makes the plan, its sequential-sampling
// advice and, with a length and width, its layout.
func makePlan(tf *targetFlags, length, width float64) (report.PlanSheet, classify.Target, error) {
	var out report.PlanSheet
	if (length > 0) != (width > 0) || length < 0 || width < 0 {
		return out, classify.Target{}, fmt.Errorf("--length and --width: give both, in metres, or neither")
	}
	if length > 0 {
		a := length * width
		if tf.area > 0 && math.Abs(tf.area-a) > 1e-9*a {
			return out, classify.Target{}, fmt.Errorf("--area %s m² differs from --length × --width = %s m²; give one or the other", classify.FormatSize(tf.area), classify.FormatSize(a))
		}
		tf.area = a
	}
	t, err := tf.target(true)
	if err != nil {
		return out, t, err
	}
	p, err := classify.MakePlan(t)
	if err == nil {
		out, err = report.NewPlanSheet(p, length, width)
	}
	return out, t, err
}
