package report

import (
	"fmt"
	"io"
	"math"

	"cleanmon/classify"
)

// PlanSheet is the JSON of `cleanmon plan --json`: the plan with its
// sequential-sampling advice, and the location layout when the zone's
// length and width were given.
type PlanSheet struct {
	classify.Plan
	LengthM float64           `json:"length_m,omitempty"`
	WidthM  float64           `json:"width_m,omitempty"`
	Layout  []PlannedLocation `json:"layout,omitempty"`
}

// PlannedLocation is one sampling location of the layout.
type PlannedLocation struct {
	ID string  `json:"id"`
	XM float64 `json:"x_m"`
	YM float64 `json:"y_m"`
}

// NewPlanSheet completes a plan with its sequential-sampling advice and,
// with a length and width (m), each location at the centre of one of
// equal-area sections (classify.Layout).
func NewPlanSheet(p classify.Plan, lengthM, widthM float64) (PlanSheet, error) {
	adv := classify.AdviseSequential(p.LimitAtLargestPerM3, p.FlowLPM)
	p.Sequential = &adv
	out := PlanSheet{Plan: p}
	if lengthM > 0 {
		pts, err := classify.Layout(lengthM, widthM, p.Locations)
		if err != nil {
			return out, err
		}
		out.LengthM, out.WidthM = lengthM, widthM
		for i, q := range pts {
			out.Layout = append(out.Layout, PlannedLocation{ID: fmt.Sprintf("L%02d", i+1), XM: math.Round(q.XM*100) / 100, YM: math.Round(q.YM*100) / 100})
		}
	}
	return out, nil
}

// WritePlan prints a sampling plan for people.
func WritePlan(w io.Writer, t classify.Target, o PlanSheet) {
	p := o.Plan
	fmt.Fprintf(w, "Sampling plan: %s, %s, %s m², ISO 14644-1:%s\n", t.Name(), p.State, classify.FormatSize(p.AreaM2), p.Edition)
	fmt.Fprintf(w, "  sampling locations (minimum)  %d\n", p.Locations)
	fmt.Fprintf(w, "  largest considered size       %s µm (limit %s /m³)\n", classify.FormatSize(p.LargestSizeUM), GroupDigits(p.LimitAtLargestPerM3))
	fmt.Fprintf(w, "  single sample volume (min)    %.2f L\n", p.SampleVolumeL)
	fmt.Fprintf(w, "  sample time at %s L/min     %.2f min (%.2f L drawn)\n", classify.FormatSize(p.FlowLPM), p.SampleMinutes, p.VolumeAtFlowL)
	if p.MinSamplesPerLocation > 1 {
		fmt.Fprintf(w, "  samples per location (min)    %d\n", p.MinSamplesPerLocation)
	}
	if p.MinVolumePerLocationL > 0 {
		fmt.Fprintf(w, "  air per location (min)        %s L\n", GroupDigits(p.MinVolumePerLocationL))
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

// PlaceAtPlan gives the map its outline and puts each location that has
// no coordinates of its own at the plan layout's section centre of the
// same rank (the order the locations were first sampled in).
func PlaceAtPlan(o *Certification, length, width float64) error {
	o.Room = &Room{LengthM: length, WidthM: width}
	pts, err := classify.Layout(length, width, max(o.RequiredLocations, len(o.Locations)))
	if err != nil {
		return err
	}
	for i := range o.Locations {
		l := &o.Locations[i]
		if l.XM == nil && l.YM == nil {
			x, y := pts[i].XM, pts[i].YM
			l.XM, l.YM = &x, &y
			o.PositionsFromPlan = true
		}
	}
	return nil
}
