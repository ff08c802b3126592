package report

import (
	"fmt"
	"io"
	"strings"
	"text/tabwriter"

	"cleanmon/classify"
)

// WriteText renders the plain-text report of o, certified against t.
func WriteText(w io.Writer, t classify.Target, o Certification) error {
	v, err := newView(t, o)
	if err != nil {
		return err
	}
	var b strings.Builder
	fmt.Fprintf(&b, "Cleanroom classification report %s\n", v.ID)
	fmt.Fprintf(&b, "%s\n\n", v.Designation)
	tw := tabwriter.NewWriter(&b, 0, 0, 2, ' ', 0)
	for _, m := range v.Meta {
		fmt.Fprintf(tw, "%s\t%s\n", m.Label, m.Value)
	}
	tw.Flush()

	fmt.Fprintf(&b, "\nVerdict: %s\n", v.Verdict)
	fmt.Fprintf(&b, "Achieved class at the considered sizes: %s\n", v.Achieved)
	writeList(&b, "Problems", v.Problems, true)
	writeList(&b, "Departures from the plan or the method", v.Departures, true)

	b.WriteString("\nSummary by location (the mean of the samples' concentrations is judged; pooled and Poisson upper are informative)\n")
	tw = tabwriter.NewWriter(&b, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "location\tx, y m\tsamples\tvolume L\tsize µm\tlimit /m³\tmean /m³\tpooled /m³ (inf.)\tPoisson 95% upper /m³ (inf.)\tresult\t")
	for _, r := range v.Summary {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", r.Location, pos(r), r.Samples, r.Volume, r.Size, r.Limit, r.Mean, r.Pooled, r.Upper, r.Result)
	}
	tw.Flush()
	if v.UCL != "" {
		fmt.Fprintf(&b, "\n%s\n", v.UCL)
	}
	writeList(&b, "Sequential sampling", v.Sequential, false)
	writeList(&b, "Warnings", v.Warnings, false)

	b.WriteString("\nLocation map\n")
	if v.Map != nil {
		fmt.Fprintf(&b, "  zone %.1f m × %.1f m\n", v.Map.LengthM, v.Map.WidthM)
		for _, p := range v.Map.Points {
			fmt.Fprintf(&b, "  %s at (%.1f, %.1f) m: %s\n", p.ID, p.XM, p.YM, p.Status)
		}
	}
	fmt.Fprintf(&b, "  %s\n", v.MapNote)

	b.WriteString("\nInstruments\n")
	if len(v.Instruments) > 0 {
		tw = tabwriter.NewWriter(&b, 0, 0, 2, ' ', 0)
		fmt.Fprintln(tw, "  counter\tmodel\tserial\tcalibration due\tstatus")
		for _, in := range v.Instruments {
			fmt.Fprintf(tw, "  %s\t%s\t%s\t%s\t%s\n", in.ID, in.Model, in.Serial, in.Due, in.Status)
		}
		tw.Flush()
	}
	if v.NoInstr != "" {
		fmt.Fprintf(&b, "  %s\n", v.NoInstr)
	}

	fmt.Fprintf(&b, "\nAppendix: every sample (counts cumulative; * minutes from volume and flow)\n")
	tw = tabwriter.NewWriter(&b, 0, 0, 2, ' ', tabwriter.AlignRight)
	head := "location\tsample\ttime UTC\tcounter\tvolume L\tmin\t"
	for _, s := range v.Sizes {
		head += "≥" + s + " count\t"
	}
	for _, s := range v.Sizes {
		head += "≥" + s + " /m³\t"
	}
	fmt.Fprintln(tw, head)
	for _, s := range v.Samples {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", s.Location, s.Sample, s.Time, s.Counter, s.Volume, s.Minutes,
			strings.Join(s.Counts, "\t"), strings.Join(s.PerM3, "\t"))
	}
	tw.Flush()

	fmt.Fprintf(&b, "\n%s\n\n", v.Caution)
	for _, sl := range v.Signatures {
		if sl.Signed != "" {
			fmt.Fprintf(&b, "%s: %s\n", sl.Label, sl.Signed)
			continue
		}
		fmt.Fprintf(&b, "%-13s (name, signature, date): ______________________________\n", sl.Label)
	}
	fmt.Fprintf(&b, "\nReport %s: the first 12 hex digits of the SHA-256 of this certification's JSON report (--format json).\n", v.ID)
	_, err = io.WriteString(w, b.String())
	return err
}

func pos(r summaryRow) string {
	if !r.First {
		return ""
	}
	return r.Position
}

func writeList(b *strings.Builder, title string, items []string, sayNone bool) {
	if len(items) == 0 {
		if sayNone {
			fmt.Fprintf(b, "%s: none\n", title)
		}
		return
	}
	fmt.Fprintf(b, "\n%s (%d):\n", title, len(items))
	for i, p := range items {
		fmt.Fprintf(b, "  %d. %s\n", i+1, p)
	}
}
