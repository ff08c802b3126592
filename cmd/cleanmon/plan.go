package main

import (
	"encoding/json"
	"fmt"
	"io"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
)

func runPlan(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("plan", "--class N --area M2 --sizes LIST [--edition 2015|1999] [--flow LPM] [--json]   (or --grade A|B|C|D --state …)", stderr)
	var tf targetFlags
	tf.register(fs, "", true)
	asJSON := fs.Bool("json", false, "print JSON")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) > 0 {
		return fail(stderr, "plan", fmt.Errorf("unexpected argument %q", pos[0]))
	}
	t, err := tf.target(true)
	if err != nil {
		return fail(stderr, "plan", err)
	}
	p, err := classify.MakePlan(t)
	if err != nil {
		return fail(stderr, "plan", err)
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(p); err != nil {
			return exitFail
		}
		return exitOK
	}
	printPlan(stdout, t, p)
	return exitOK
}

func printPlan(w io.Writer, t classify.Target, p classify.Plan) {
	fmt.Fprintf(w, "Sampling plan: %s, %s, %s m², ISO 14644-1:%s\n", t.Name(), p.State, classify.FormatSize(p.AreaM2), p.Edition)
	fmt.Fprintf(w, "  sampling locations (minimum)  %d\n", p.Locations)
	fmt.Fprintf(w, "  largest considered size       %s µm (limit %s /m³)\n", classify.FormatSize(p.LargestSizeUM), report.GroupDigits(p.LimitAtLargestPerM3))
	fmt.Fprintf(w, "  single sample volume (min)    %.2f L\n", p.SampleVolumeL)
	fmt.Fprintf(w, "  sample time at %s L/min     %.2f min (%.2f L drawn)\n", classify.FormatSize(p.FlowLPM), p.SampleMinutes, p.VolumeAtFlowL)
	if p.MinSamplesPerLocation > 1 {
		fmt.Fprintf(w, "  samples per location (min)    %d\n", p.MinSamplesPerLocation)
	}
	if p.MinVolumePerLocationL > 0 {
		fmt.Fprintf(w, "  air per location (min)        %s L\n", report.GroupDigits(p.MinVolumePerLocationL))
	}
	for _, n := range p.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
}
