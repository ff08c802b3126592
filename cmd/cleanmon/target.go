package main

import (
	"flag"
	"fmt"
	"strconv"

	"cleanmon/classify"
)

// targetFlags are the flags that name what a zone is classified against;
// limits, plan and certify share them so they read the same everywhere.
type targetFlags struct {
	class, grade, state, edition, sizes string
	area, flow                          float64
	allowBlank                          bool
}

func (f *targetFlags) register(fs *flag.FlagSet, defSizes string, withArea bool) {
	fs.StringVar(&f.class, "class", "", "ISO 14644-1 class, 1–9 in steps of 0.1")
	fs.StringVar(&f.grade, "grade", "", "EU GMP Annex 1 grade A, B, C or D (instead of --class)")
	fs.StringVar(&f.state, "state", classify.AtRest, "operating state: at-rest or in-operation")
	fs.StringVar(&f.edition, "edition", "2015", "ISO 14644-1 edition: 2015, or 1999 (legacy)")
	fs.StringVar(&f.sizes, "sizes", defSizes, "considered threshold sizes in µm, comma-separated")
	fs.BoolVar(&f.allowBlank, "allow-blank-cells", false, "accept sizes the class table leaves blank (reported, not judged)")
	if withArea {
		fs.Float64Var(&f.area, "area", 0, "floor area of the zone in m²")
		fs.Float64Var(&f.flow, "flow", classify.DefaultFlowLPM, "counter sample flow in L/min: the plan's sample time, and the sampling time of a sample without duration_s (its volume over this flow), checked against the 1-minute minimum")
	}
}

// target checks the flags and returns the classify target.
func (f *targetFlags) target(needArea bool) (classify.Target, error) {
	var t classify.Target
	switch {
	case f.class == "" && f.grade == "":
		return t, fmt.Errorf("--class or --grade is required")
	case f.class != "" && f.grade != "":
		return t, fmt.Errorf("give --class or --grade, not both")
	case f.class != "":
		n, err := parseClass("--class", f.class)
		if err != nil {
			return t, err
		}
		t.Class = n
	default:
		if err := classify.ValidateGrade(f.grade); err != nil {
			return t, fmt.Errorf("--grade: %w", err)
		}
		t.Grade = f.grade
	}
	if err := classify.ValidateState(f.state); err != nil {
		return t, fmt.Errorf("--state: %w", err)
	}
	t.State = f.state
	ed, err := classify.ParseEdition(f.edition)
	if err != nil {
		return t, fmt.Errorf("--edition: %w", err)
	}
	t.Edition = ed
	if f.sizes != "" {
		sz, err := classify.ParseSizes(f.sizes)
		if err != nil {
			return t, fmt.Errorf("--sizes: %w", err)
		}
		t.Sizes = sz
	} else if t.Grade == "" {
		return t, fmt.Errorf("--sizes is required with --class")
	}
	if needArea && !(f.area > 0) {
		return t, fmt.Errorf("--area: the zone's floor area in m² is required and must be positive")
	}
	t.AreaM2 = f.area
	t.FlowLPM = f.flow
	t.AllowBlank = f.allowBlank
	return t, nil
}

// parseClass reads an ISO class flag.
func parseClass(flag, v string) (float64, error) {
	n, err := strconv.ParseFloat(v, 64)
	if err != nil {
		return 0, fmt.Errorf("%s: %q is not a number", flag, v)
	}
	if err := classify.ValidateClass(n); err != nil {
		return 0, fmt.Errorf("%s: %w", flag, err)
	}
	return n, nil
}
