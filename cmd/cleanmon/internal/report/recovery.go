package report

import (
	"fmt"
	"io"
	"math"
	"strconv"
	"time"

	"cleanmon/classify"
)

// WriteRecovery prints a recovery test of the series in name for people.
func WriteRecovery(w io.Writer, name string, a classify.RecoveryTest) error {
	fmt.Fprintf(w, "Recovery test (ISO 14644-3) of %s at ≥%s µm\n", name, a.SizeUM)
	fmt.Fprintf(w, "  recovery rate               %.4f /min\n", a.RatePerMin)
	fmt.Fprintf(w, "  100:1 recovery time         %.2f min (ln 100 / rate)\n", a.T100Min)
	fmt.Fprintf(w, "  fit quality R²              %.4f\n", a.RSquared)
	fmt.Fprintf(w, "  points used                 %d, from %.2f to %.2f min after %s\n", a.Points, a.FromMin, a.ToMin, a.Start.Format(time.RFC3339))
	fmt.Fprintf(w, "  fitted at the first point    %s /m³ (%s /m³ extrapolated to 0 min)\n",
		strconv.FormatFloat(a.C0PerM3*math.Exp(-a.RatePerMin*a.FromMin), 'f', 0, 64), strconv.FormatFloat(a.C0PerM3, 'f', 0, 64))
	if a.TargetClass != nil {
		fmt.Fprintf(w, "  floor                       %s /m³ (ISO %s limit at ≥%s µm): later points left out\n",
			strconv.FormatFloat(a.FloorPerM3, 'f', -1, 64), classify.FormatClass(*a.TargetClass), a.SizeUM)
	}
	fmt.Fprintf(w, "  %-8s  %12s  %s\n", "minute", "/m³", "used")
	for _, p := range a.Series {
		used := "no"
		if p.Used {
			used = "yes"
		}
		fmt.Fprintf(w, "  %8.2f  %12.0f  %s\n", p.Minute, p.PerM3, used)
	}
	return nil
}
