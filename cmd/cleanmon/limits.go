package main

import (
	"encoding/json"
	"fmt"
	"io"

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
	Notes       []string            `json:"notes"`
	sizes       []float64
}

func runLimits(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("limits", "--class N [--sizes LIST] [--edition 2015|1999] [--json] | --grade A|B|C|D --state at-rest|in-operation [--use classification|monitoring] [--json]", stderr)
	var tf targetFlags
	tf.register(fs, "", false)
	use := fs.String("use", string(classify.GMPClassification), "grade table: classification or monitoring")
	asJSON := fs.Bool("json", false, "print JSON")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) > 0 {
		return fail(stderr, "limits", fmt.Errorf("unexpected argument %q", pos[0]))
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
	for _, n := range out.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
}
