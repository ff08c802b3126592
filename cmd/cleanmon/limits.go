package main

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"text/tabwriter"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
)

const allTableSizes = "0.1,0.2,0.3,0.5,1,5"

// limitsOut is the JSON of `cleanmon limits --json` (the fixed shape and the
// certification issue: a blank cell is null and has a note).
type limitsOut struct {
	Class       *float64            `json:"class,omitempty"`
	Grade       string              `json:"grade,omitempty"`
	State       string              `json:"state,omitempty"`
	Use         string              `json:"use,omitempty"`
	Edition     string              `json:"edition,omitempty"`
	LimitsPerM3 map[string]*float64 `json:"limits_per_m3"`
	// FEDStd is the FED-STD-209E English class the ISO class matches by
	// its ≥0.5 µm limit (--fed-std); "" when it matches none.
	FEDStd *string         `json:"fed_std_209e,omitempty"`
	Macro  *classify.Macro `json:"macro,omitempty"`
	Notes  []string        `json:"notes"`
	sizes  []float64
}

// fedNote says what the FED-STD-209E column is and is not.
const fedNote = "FED-STD-209E was cancelled in 2001; its English class (particles/ft³ ≥0.5 µm) is shown only to read old specifications"

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
	out, err := limitTable(t, classify.GMPUse(*use))
	if err != nil {
		return fail(stderr, "limits", err)
	}
	if *fed {
		label := classify.FEDLabel(t.Class)
		out.FEDStd = &label
		out.Notes = append(out.Notes, fedNote)
	}
	if *macro != "" {
		m, err := classify.ParseMacro(*macro)
		if err != nil {
			return fail(stderr, "limits", fmt.Errorf("--macro: %w", err))
		}
		out.Macro = &m
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(out); err != nil {
			return exitFail
		}
		return exitOK
	}
	printLimits(stdout, t, out)
	return exitOK
}

func limitTable(t classify.Target, use classify.GMPUse) (limitsOut, error) {
	out := limitsOut{LimitsPerM3: map[string]*float64{}, Notes: []string{}, sizes: t.Sizes}
	if t.Grade != "" {
		out.Grade, out.State, out.Use = t.Grade, t.State, string(use)
	} else {
		c := t.Class
		out.Class, out.Edition = &c, string(t.Edition)
		if n := classify.ClassNote(c); n != "" {
			out.Notes = append(out.Notes, n)
		}
	}
	for _, s := range t.Sizes {
		var l classify.Limit
		var err error
		if t.Grade != "" {
			l, err = classify.GMPLimit(t.Grade, t.State, use, s)
		} else {
			l, err = classify.ISOLimit(t.Class, s, t.Edition)
		}
		if err != nil {
			return out, err
		}
		key := classify.FormatSize(s)
		if l.Specified {
			v := l.PerM3
			out.LimitsPerM3[key] = &v
		} else {
			out.LimitsPerM3[key] = nil
			out.Notes = append(out.Notes, key+" µm: "+l.Note)
		}
	}
	return out, nil
}

func printLimits(w io.Writer, t classify.Target, out limitsOut) {
	if t.Grade != "" {
		fmt.Fprintf(w, "EU GMP Annex 1 grade %s, %s, %s limits\n", t.Grade, t.State, out.Use)
	} else {
		fmt.Fprintf(w, "ISO 14644-1:%s class %s limits\n", t.Edition, classify.FormatClass(t.Class))
	}
	fmt.Fprintf(w, "%10s  %s\n", "≥ size µm", "max particles/m³")
	for _, s := range out.sizes {
		key := classify.FormatSize(s)
		v := out.LimitsPerM3[key]
		if v == nil {
			fmt.Fprintf(w, "%10s  %s\n", key, "— (no limit)")
			continue
		}
		fmt.Fprintf(w, "%10s  %s\n", key, report.GroupDigits(*v))
	}
	if out.FEDStd != nil {
		label := *out.FEDStd
		if label == "" {
			label = "none of the six English classes"
		}
		fmt.Fprintf(w, "FED-STD-209E: %s\n", label)
	}
	if out.Macro != nil {
		fmt.Fprintf(w, "macroparticles: %s\n", out.Macro.String())
	}
	for _, n := range out.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
}

// fedRow is one row of the ISO / FED-STD-209E table.
type fedRow struct {
	ISOClass float64 `json:"iso_class"`
	PerM3    float64 `json:"limit_0.5_per_m3"`
	PerFt3   float64 `json:"limit_0.5_per_ft3"`
	FEDStd   string  `json:"fed_std_209e"`
}

// printFEDTable prints the whole-number ISO classes with a ≥0.5 µm limit
// beside the FED-STD-209E English class each matches.
func printFEDTable(w io.Writer, asJSON bool) int {
	var rows []fedRow
	for n := 1.0; n <= 9; n++ {
		l, err := classify.ISOLimit(n, 0.5, classify.Edition1999)
		if err != nil || !l.Specified {
			continue
		}
		ft3, _, _ := classify.FEDFromISO(n)
		rows = append(rows, fedRow{ISOClass: n, PerM3: l.PerM3, PerFt3: math.Round(ft3*10) / 10, FEDStd: classify.FEDLabel(n)})
	}
	if asJSON {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		if err := enc.Encode(map[string]any{"classes": rows, "notes": []string{fedNote}}); err != nil {
			return exitFail
		}
		return exitOK
	}
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "ISO class\t≥0.5 µm /m³\t≥0.5 µm /ft³\tFED-STD-209E\t")
	for _, r := range rows {
		label := r.FEDStd
		if label == "" {
			label = "—"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t\n", classify.FormatClass(r.ISOClass), report.GroupDigits(r.PerM3), report.GroupDigits(r.PerFt3), label)
	}
	tw.Flush()
	fmt.Fprintf(w, "note: %s\n", fedNote)
	return exitOK
}
