package ops

import (
	"fmt"
	"strconv"

	"cleanmon/classify"
)

// TargetSpec is what a zone is classified against, as written on the
// command line; limits, plan and certify share it so they read the same
// everywhere.
type TargetSpec struct {
	Class, Grade, State, Edition, Sizes string
	Area, Flow                          float64
	AllowBlank                          bool
}

// Target checks the spec and returns the classify target; each error
// names its flag.
func (f *TargetSpec) Target(needArea bool) (classify.Target, error) {
	var t classify.Target
	switch {
	case f.Class == "" && f.Grade == "":
		return t, fmt.Errorf("--class or --grade is required")
	case f.Class != "" && f.Grade != "":
		return t, fmt.Errorf("give --class or --grade, not both")
	case f.Class != "":
		n, err := parseClass("--class", f.Class)
		if err != nil {
			return t, err
		}
		t.Class = n
	default:
		if err := classify.ValidateGrade(f.Grade); err != nil {
			return t, fmt.Errorf("--grade: %w", err)
		}
		t.Grade = f.Grade
	}
	if err := classify.ValidateState(f.State); err != nil {
		return t, fmt.Errorf("--state: %w", err)
	}
	t.State = f.State
	ed, err := classify.ParseEdition(f.Edition)
	if err != nil {
		return t, fmt.Errorf("--edition: %w", err)
	}
	t.Edition = ed
	if f.Sizes != "" {
		sz, err := classify.ParseSizes(f.Sizes)
		if err != nil {
			return t, fmt.Errorf("--sizes: %w", err)
		}
		t.Sizes = sz
	} else if t.Grade == "" {
		return t, fmt.Errorf("--sizes is required with --class")
	}
	if needArea && !(f.Area > 0) {
		return t, fmt.Errorf("--area: the zone's floor area in m² is required and must be positive")
	}
	t.AreaM2 = f.Area
	t.FlowLPM = f.Flow
	t.AllowBlank = f.AllowBlank
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
