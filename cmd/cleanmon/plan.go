package main

import (
	"encoding/json"
	"fmt"
	"io"
	"math"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
)

// planOut is the JSON of `cleanmon plan --json`: the plan, and the
// location layout when the zone's length and width were given.
type planOut struct {
	classify.Plan
	LengthM float64        `json:"length_m,omitempty"`
	WidthM  float64        `json:"width_m,omitempty"`
	Layout  []plannedPlace `json:"layout,omitempty"`
}

// plannedPlace is one sampling location of the layout.
type plannedPlace struct {
	ID string  `json:"id"`
	XM float64 `json:"x_m"`
	YM float64 `json:"y_m"`
}

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
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(out); err != nil {
			return exitFail
		}
		return exitOK
	}
	printPlan(stdout, t, out)
	return exitOK
}

// makePlan checks the flags and makes the plan, its sequential-sampling
// advice and, with a length and width, its layout.
func makePlan(tf *targetFlags, length, width float64) (planOut, classify.Target, error) {
	var out planOut
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
	if err != nil {
		return out, t, err
	}
	adv := classify.AdviseSequential(p.LimitAtLargestPerM3, p.FlowLPM)
	p.Sequential = &adv
	out.Plan = p
	if length > 0 {
		pts, err := classify.Layout(length, width, p.Locations)
		if err != nil {
			return out, t, err
		}
		out.LengthM, out.WidthM = length, width
		for i, q := range pts {
			out.Layout = append(out.Layout, plannedPlace{ID: fmt.Sprintf("L%02d", i+1), XM: math.Round(q.XM*100) / 100, YM: math.Round(q.YM*100) / 100})
		}
	}
	return out, t, nil
}

func printPlan(w io.Writer, t classify.Target, o planOut) {
	p := o.Plan
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
	if s := p.Sequential; s != nil {
		if s.Suggested {
			fmt.Fprintf(w, "  sequential sampling           suggested: %s\n", s.Reason)
		} else {
			fmt.Fprintf(w, "  sequential sampling           not needed: %s\n", s.Reason)
		}
	}
	if len(o.Layout) > 0 {
		fmt.Fprintf(w, "  locations at the centres of %d equal sections of %s m × %s m (x along the length, y along the width):\n",
			len(o.Layout), classify.FormatSize(o.LengthM), classify.FormatSize(o.WidthM))
		for _, l := range o.Layout {
			fmt.Fprintf(w, "    %s  x %6.2f m  y %6.2f m\n", l.ID, l.XM, l.YM)
		}
	}
	for _, n := range p.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
}
