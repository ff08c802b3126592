package report

import (
	"fmt"
	"io"
	"math"
	"text/tabwriter"

	"cleanmon/classify"
)

// LimitTable is the JSON of `cleanmon limits --json`: a blank cell is
// null and has a note.
type LimitTable struct {
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
	Sizes  []float64       `json:"-"` // the sizes in the order asked
}

// FEDNote says what the FED-STD-209E column is and is not.
const FEDNote = "FED-STD-209E was cancelled in 2001; its English class (particles/ft³ ≥0.5 µm) is shown only to read old specifications"

// NewLimitTable is the limits of a target at its sizes, blank cells kept
// blank with the table's reason.
func NewLimitTable(t classify.Target, use classify.GMPUse) (LimitTable, error) {
	out := LimitTable{LimitsPerM3: map[string]*float64{}, Notes: []string{}, Sizes: t.Sizes}
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

// WriteLimits prints a limit table for people.
func WriteLimits(w io.Writer, t classify.Target, out LimitTable) {
	if t.Grade != "" {
		fmt.Fprintf(w, "EU GMP Annex 1 grade %s, %s, %s limits\n", t.Grade, t.State, out.Use)
	} else {
		fmt.Fprintf(w, "ISO 14644-1:%s class %s limits\n", t.Edition, classify.FormatClass(t.Class))
	}
	fmt.Fprintf(w, "%10s  %s\n", "≥ size µm", "max particles/m³")
	for _, s := range out.Sizes {
		key := classify.FormatSize(s)
		v := out.LimitsPerM3[key]
		if v == nil {
			fmt.Fprintf(w, "%10s  %s\n", key, "— (no limit)")
			continue
		}
		fmt.Fprintf(w, "%10s  %s\n", key, GroupDigits(*v))
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

// FEDRow is one row of the ISO / FED-STD-209E table.
type FEDRow struct {
	ISOClass float64 `json:"iso_class"`
	PerM3    float64 `json:"limit_0.5_per_m3"`
	PerFt3   float64 `json:"limit_0.5_per_ft3"`
	FEDStd   string  `json:"fed_std_209e"`
}

// FEDTable is the whole-number ISO classes with a ≥0.5 µm limit beside
// the FED-STD-209E English class each matches.
func FEDTable() []FEDRow {
	var rows []FEDRow
	for n := 1.0; n <= 9; n++ {
		l, err := classify.ISOLimit(n, 0.5, classify.Edition1999)
		if err != nil || !l.Specified {
			continue
		}
		ft3, _, _ := classify.FEDFromISO(n)
		rows = append(rows, FEDRow{ISOClass: n, PerM3: l.PerM3, PerFt3: math.Round(ft3*10) / 10, FEDStd: classify.FEDLabel(n)})
	}
	return rows
}

// WriteFEDTable prints the FED-STD-209E table for people.
func WriteFEDTable(w io.Writer, rows []FEDRow) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "ISO class\t≥0.5 µm /m³\t≥0.5 µm /ft³\tFED-STD-209E\t")
	for _, r := range rows {
		label := r.FEDStd
		if label == "" {
			label = "—"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t\n", classify.FormatClass(r.ISOClass), GroupDigits(r.PerM3), GroupDigits(r.PerFt3), label)
	}
	tw.Flush()
	_, err := fmt.Fprintf(w, "note: %s\n", FEDNote)
	return err
}

// AddFED adds the FED-STD-209E class an ISO class matches, with the note
// that says what it is and is not.
func (out *LimitTable) AddFED(class float64) {
	label := classify.FEDLabel(class)
	out.FEDStd = &label
	out.Notes = append(out.Notes, FEDNote)
}
