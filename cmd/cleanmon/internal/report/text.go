package report

import (
	"fmt"
	"io"
	"strings"
	"text/tabwriter"

	"cleanmon/classify"
)

// Caution is printed on every certification output: the verdict is an
// aid to, not a substitute for, the people and rules accountable for it.
const Caution = "This report supports, and does not replace, the judgement of the site's qualified people, its procedures and the applicable standards and regulations."

func verdictWord(v string) string {
	switch v {
	case classify.Pass:
		return "PASS"
	case classify.Incomplete:
		return "INCOMPLETE"
	}
	return "FAIL"
}

// WriteText renders the plain-text report of o, certified against t.
func WriteText(w io.Writer, t classify.Target, o Certification) error {
	r := o.Report
	var b strings.Builder
	fmt.Fprintf(&b, "Certification of %s against %s (%s), ISO 14644-1:%s\n", orDash(o.Zone), t.Name(), r.State, r.Edition)
	if o.Site != "" {
		fmt.Fprintf(&b, "Site: %s\n", o.Site)
	}
	fmt.Fprintf(&b, "Date: %s   Samples: %s (sha256 %s)\n", o.Date, o.SamplesFile, short(o.SamplesSHA256))
	if o.Certifier != "" {
		fmt.Fprintf(&b, "By: %s\n", o.Certifier)
	}
	fmt.Fprintf(&b, "Plan: %s m², at least %d locations, single sample ≥ %.2f L\n\n",
		classify.FormatSize(r.AreaM2), r.RequiredLocations, r.Plan.SampleVolumeL)

	tw := tabwriter.NewWriter(&b, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "location\tsamples\tvolume L\tsize µm\tlimit /m³\tmean /m³\t95% Poisson upper /m³\tresult\t")
	for _, l := range r.Locations {
		for i, key := range r.Sizes {
			id, n, vol := "", "", ""
			if i == 0 {
				id, n, vol = l.ID, fmt.Sprint(l.Samples), fmt.Sprintf("%.1f", l.VolumeL)
			}
			lim, res := "no limit", "not judged"
			if v := r.LimitsPerM3[key]; v != nil {
				lim = GroupDigits(*v)
				res = "ok"
				if p := l.PassBySize[key]; p != nil && !*p {
					res = "OVER LIMIT"
				}
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t≥%s\t%s\t%s\t%s\t%s\t\n", id, n, vol, key, lim,
				GroupDigits(round1(l.MeanPerM3[key])), GroupDigits(round1(l.Upper95PerM3[key])), res)
		}
	}
	tw.Flush()
	if len(r.UCL95PerM3) > 0 {
		fmt.Fprintf(&b, "\n95%% upper confidence limit of the %d location means (1999 Annex C):\n", len(r.Locations))
		for _, key := range r.Sizes {
			fmt.Fprintf(&b, "  ≥%s µm: %s /m³\n", key, GroupDigits(round1(r.UCL95PerM3[key])))
		}
	}
	if r.AchievedClass != nil {
		fmt.Fprintf(&b, "\nAchieved class at the considered sizes: ISO %s (by the class formula)\n", classify.FormatClass(*r.AchievedClass))
	} else {
		fmt.Fprintf(&b, "\nAchieved class at the considered sizes: none (above ISO 9)\n")
	}
	for _, wn := range r.Warnings {
		fmt.Fprintf(&b, "warning: %s\n", wn)
	}
	if len(r.Problems) > 0 {
		fmt.Fprintf(&b, "\nProblems (%d):\n", len(r.Problems))
		for i, p := range r.Problems {
			fmt.Fprintf(&b, "  %d. %s\n", i+1, p)
		}
	}
	fmt.Fprintf(&b, "\nVerdict: %s\n\n%s\n", verdictWord(r.Verdict), Caution)
	_, err := io.WriteString(w, b.String())
	return err
}

func round1(v float64) float64 {
	if v >= 100 {
		return float64(int64(v + 0.5))
	}
	return float64(int64(v*10+0.5)) / 10
}

func orDash(s string) string {
	if s == "" {
		return "the zone"
	}
	return s
}

func short(h string) string {
	if len(h) > 12 {
		return h[:12]
	}
	return h
}
