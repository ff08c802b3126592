package main

import (
	"fmt"
	"io"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
)

const allTableSizes = "0.1,0.2,0.3,0.5,1,5"

func runLimits(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("limits", "--class N [--sizes LIST] [--edition 2015|1999] [--json] | --grade A|B|C|D --state at-rest|in-operation [--use classification|monitoring] [--json]", stderr)
	var tf targetFlags
	tf.register(fs, "", false)
	use := fs.String("use", string(classify.GMPClassification), "grade table: classification or monitoring")
	asJSON := fs.Bool("json", false, "print JSON")
	fed := fs.Bool("fed-std", false, "show the FED-STD-209E class the ISO class matches (alone: the table of ISO classes beside the old classes)")
	macro := fs.String("macro", "", `macroparticle descriptor to print with the limits, e.g. "M(10000; >5 µm); time-of-flight spectrometer" (ISO 14644-1:2015 Annex C)`)
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) > 0 {
		return fail(stderr, "limits", fmt.Errorf("unexpected argument %q", pos[0]))
	}
	if *fed && tf.class == "" && tf.grade == "" {
		return printFEDTable(stdout, *asJSON)
	}
	if *fed && tf.grade != "" {
		return fail(stderr, "limits", fmt.Errorf("--fed-std: FED-STD-209E classes match ISO classes, not GMP grades"))
	}
	if tf.sizes == "" {
		tf.sizes = allTableSizes
		if tf.grade != "" {
			tf.sizes = "0.5,5"
		}
	}
	tf.allowBlank = true // a limits table shows blank cells; it does not refuse them
	t, err := tf.target(false)
	if err != nil {
		return fail(stderr, "limits", err)
	}
	out, err := report.NewLimitTable(t, classify.GMPUse(*use))
	if err != nil {
		return fail(stderr, "limits", err)
	}
	if *fed {
		out.AddFED(t.Class)
	}
	if *macro != "" {
		m, err := classify.ParseMacro(*macro)
		if err != nil {
			return fail(stderr, "limits", fmt.Errorf("--macro: %w", err))
		}
		out.Macro = &m
	}
	if *asJSON {
		return printJSON(stdout, out)
	}
	report.WriteLimits(stdout, t, out)
	return exitOK
}

func printFEDTable(w io.Writer, asJSON bool) int {
	rows := report.FEDTable()
	if asJSON {
		return printJSON(w, map[string]any{"classes": rows, "notes": []string{report.FEDNote}})
	}
	if err := report.WriteFEDTable(w, rows); err != nil {
		return exitFail
	}
	return exitOK
}
