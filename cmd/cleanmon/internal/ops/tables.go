package ops

import (
	"fmt"
	"io"
	"math"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
)

// PlanOptions are the flags of `cleanmon plan`.
type PlanOptions struct {
	Target        TargetSpec
	Length, Width float64 // of the zone, for the area and the layout; both or neither
	JSON          bool
	Args          []string // none are taken
}

// Plan prints the sampling plan of a zone, its sequential-sampling advice
// and, with a length and width, its layout.
func Plan(o PlanOptions, stdout io.Writer) error {
	if len(o.Args) > 0 {
		return usage(fmt.Errorf("unexpected argument %q", o.Args[0]))
	}
	out, t, err := makePlan(&o.Target, o.Length, o.Width)
	if err != nil {
		return usage(err)
	}
	if o.JSON {
		return printJSON(stdout, out)
	}
	report.WritePlan(stdout, t, out)
	return nil
}

// makePlan checks the flags and makes the plan, its sequential-sampling
// advice and, with a length and width, its layout.
func makePlan(tf *TargetSpec, length, width float64) (report.PlanSheet, classify.Target, error) {
	var out report.PlanSheet
	if (length > 0) != (width > 0) || length < 0 || width < 0 {
		return out, classify.Target{}, fmt.Errorf("--length and --width: give both, in metres, or neither")
	}
	if length > 0 {
		a := length * width
		if tf.Area > 0 && math.Abs(tf.Area-a) > 1e-9*a {
			return out, classify.Target{}, fmt.Errorf("--area %s m² differs from --length × --width = %s m²; give one or the other", classify.FormatSize(tf.Area), classify.FormatSize(a))
		}
		tf.Area = a
	}
	t, err := tf.Target(true)
	if err != nil {
		return out, t, err
	}
	p, err := classify.MakePlan(t)
	if err == nil {
		out, err = report.NewPlanSheet(p, length, width)
	}
	return out, t, err
}

// LimitsOptions are the flags of `cleanmon limits`.
type LimitsOptions struct {
	Target    TargetSpec
	Use       string // the grade table: classification or monitoring
	JSON, FED bool   // print JSON; show the FED-STD-209E classes
	Macro     string // macroparticle descriptor printed with the limits
	Args      []string
}

// allTableSizes are the sizes of a class's limits when none are asked for.
const allTableSizes = "0.1,0.2,0.3,0.5,1,5"

// Limits prints the limits of an ISO class or an EU GMP grade, or with
// FED alone the table of ISO classes beside the old FED-STD-209E ones.
func Limits(o LimitsOptions, stdout io.Writer) error {
	tf := o.Target
	if len(o.Args) > 0 {
		return usage(fmt.Errorf("unexpected argument %q", o.Args[0]))
	}
	if o.FED && tf.Class == "" && tf.Grade == "" {
		return fedTable(stdout, o.JSON)
	}
	if o.FED && tf.Grade != "" {
		return usage(fmt.Errorf("--fed-std: FED-STD-209E classes match ISO classes, not GMP grades"))
	}
	if tf.Sizes == "" {
		tf.Sizes = allTableSizes
		if tf.Grade != "" {
			tf.Sizes = "0.5,5"
		}
	}
	tf.AllowBlank = true // a limits table shows blank cells; it does not refuse them
	t, err := tf.Target(false)
	if err != nil {
		return usage(err)
	}
	out, err := report.NewLimitTable(t, classify.GMPUse(o.Use))
	if err != nil {
		return usage(err)
	}
	if o.FED {
		out.AddFED(t.Class)
	}
	if o.Macro != "" {
		m, err := classify.ParseMacro(o.Macro)
		if err != nil {
			return usage(fmt.Errorf("--macro: %w", err))
		}
		out.Macro = &m
	}
	if o.JSON {
		return printJSON(stdout, out)
	}
	report.WriteLimits(stdout, t, out)
	return nil
}

func fedTable(w io.Writer, asJSON bool) error {
	rows := report.FEDTable()
	if asJSON {
		return printJSON(w, map[string]any{"classes": rows, "notes": []string{report.FEDNote}})
	}
	if err := report.WriteFEDTable(w, rows); err != nil {
		return silent(err)
	}
	return nil
}
