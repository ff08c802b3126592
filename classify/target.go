package classify

import (
	"errors"
	"fmt"
	"math"
)

// ErrBlankCell reports a size at which the target's table gives no limit,
// when the caller has not allowed blank cells.
var ErrBlankCell = errors.New("classify: no limit at this size")

// ErrTarget reports a target that is neither a valid ISO class nor a valid
// grade.
var ErrTarget = errors.New("classify: invalid target")

// Target is what a zone is classified against: an ISO class (Class > 0) or
// an EU GMP grade (Grade set), in an operating state, at the considered
// sizes, under an edition of ISO 14644-1 (which also rules the number of
// locations and the sample volume for grades).
type Target struct {
	Class      float64   // ISO class 1–9 in 0.1 steps, or 0 when Grade is set
	Grade      string    // "A".."D", or "" when Class is set
	State      string    // AtRest or InOperation; "" means AtRest
	Edition    Edition   // "" means 2015
	Sizes      []float64 // considered threshold sizes in µm, ascending; for grades, default 0.5 and 5
	AreaM2     float64   // area of the zone
	AllowBlank bool      // accept sizes the table leaves blank (they are then reported, not judged)
	FlowLPM    float64   // counter flow for the plan's sample time; 0 means 28.3 L/min
}

// DefaultFlowLPM is the usual sample flow of a fixed or portable particle
// counter, 1 ft³/min (from memory).
const DefaultFlowLPM = 28.3

// SizeLimit is a Limit at one considered size.
type SizeLimit struct {
	SizeUM float64
	Limit
}

// normalise fills defaults and checks the target. It returns the limits at
// the considered sizes, in order, and warnings for blank cells accepted.
func (t *Target) normalise() ([]SizeLimit, []string, error) {
	if t.Edition == "" {
		t.Edition = Edition2015
	}
	if _, err := ParseEdition(string(t.Edition)); err != nil {
		return nil, nil, err
	}
	if t.State == "" {
		t.State = AtRest
	}
	if err := ValidateState(t.State); err != nil {
		return nil, nil, err
	}
	if t.FlowLPM == 0 {
		t.FlowLPM = DefaultFlowLPM
	}
	if !(t.FlowLPM > 0) || math.IsInf(t.FlowLPM, 0) {
		return nil, nil, fmt.Errorf("%w: flow %v L/min must be positive", ErrTarget, t.FlowLPM)
	}
	switch {
	case t.Class != 0 && t.Grade != "":
		return nil, nil, fmt.Errorf("%w: give an ISO class or a GMP grade, not both", ErrTarget)
	case t.Grade != "":
		if err := ValidateGrade(t.Grade); err != nil {
			return nil, nil, err
		}
		if len(t.Sizes) == 0 {
			t.Sizes = append([]float64(nil), GMPSizes...)
		}
	default:
		if err := ValidateClass(t.Class); err != nil {
			return nil, nil, err
		}
		t.Class = roundClass(t.Class)
		if t.Class == 9 && t.State != InOperation {
			return nil, nil, fmt.Errorf("%w: ISO 9 applies to the in-operation state only", ErrTarget)
		}
	}
	if len(t.Sizes) == 0 {
		return nil, nil, fmt.Errorf("%w: no sizes considered", ErrTarget)
	}
	for i := 1; i < len(t.Sizes); i++ {
		if !(t.Sizes[i] > t.Sizes[i-1]) {
			return nil, nil, fmt.Errorf("%w: sizes must be ascending and distinct", ErrTarget)
		}
	}
	out := make([]SizeLimit, 0, len(t.Sizes))
	var warn []string
	anySpecified := false
	for _, s := range t.Sizes {
		var l Limit
		var err error
		if t.Grade != "" {
			l, err = GMPLimit(t.Grade, t.State, GMPClassification, s)
		} else {
			l, err = ISOLimit(t.Class, s, t.Edition)
		}
		if err != nil {
			return nil, nil, err
		}
		if !l.Specified {
			// A grade's open cell is the Annex's own choice, not a plan
			// error: report it. An ISO blank cell is refused unless allowed.
			if t.Grade == "" && !t.AllowBlank {
				return nil, nil, fmt.Errorf("%w: %s at %s µm: %s", ErrBlankCell, t.Name(), FormatSize(s), l.Note)
			}
			warn = append(warn, fmt.Sprintf("%s µm not judged: %s", FormatSize(s), l.Note))
		} else {
			anySpecified = true
			if l.Note != "" {
				warn = append(warn, fmt.Sprintf("%s µm: limit %s /m³ %s", FormatSize(s), fmtNum(l.PerM3), l.Note))
			}
		}
		out = append(out, SizeLimit{SizeUM: s, Limit: l})
	}
	warn = append(warn, closeSizes(t.Sizes)...)
	if !anySpecified {
		return nil, nil, fmt.Errorf("%w: %s has no limit at any considered size", ErrBlankCell, t.Name())
	}
	return out, warn, nil
}

// Name is how the target is written in reports: "ISO 5" or "grade B".
func (t Target) Name() string {
	if t.Grade != "" {
		return "grade " + t.Grade
	}
	return "ISO " + FormatClass(t.Class)
}

// MakePlan returns the sampling plan for a target: minimum locations, the
// single sample volume at the largest size that has a limit, the sample
// time at the target's flow, and the grade A minimum volume per location.
func MakePlan(t Target) (Plan, error) {
	limits, warn, err := t.normalise()
	if err != nil {
		return Plan{}, err
	}
	n, err := MinLocations(t.AreaM2, t.Edition)
	if err != nil {
		return Plan{}, err
	}
	p := Plan{
		Edition: t.Edition, State: t.State, AreaM2: t.AreaM2, Locations: n,
		FlowLPM: t.FlowLPM, LimitsPerM3: map[string]*float64{}, Notes: append([]string{}, warn...),
		MinSamplesPerLocation: 1,
	}
	if t.Grade != "" {
		p.Grade = t.Grade
	} else {
		c := t.Class
		p.Class = &c
		if note := ClassNote(c); note != "" {
			p.Notes = append(p.Notes, note)
		}
	}
	for _, l := range limits {
		p.Sizes = append(p.Sizes, FormatSize(l.SizeUM))
		if l.Specified {
			v := l.PerM3
			p.LimitsPerM3[FormatSize(l.SizeUM)] = &v
			p.LargestSizeUM = l.SizeUM
			p.LimitAtLargestPerM3 = l.PerM3
		} else {
			p.LimitsPerM3[FormatSize(l.SizeUM)] = nil
		}
	}
	p.SampleVolumeL = CeilTo(SampleVolumeL(p.LimitAtLargestPerM3), 2)
	p.SampleMinutes = CeilTo(SampleMinutes(p.SampleVolumeL, t.FlowLPM), 2)
	p.VolumeAtFlowL = CeilTo(p.SampleMinutes*t.FlowLPM, 2)
	if t.Grade == "A" {
		p.MinVolumePerLocationL = GradeAMinVolumeL
		p.Notes = append(p.Notes, "grade A classification needs at least 1 m³ of air at each location")
	}
	if t.Edition == Edition1999 && n == 1 {
		p.MinSamplesPerLocation = 3
		p.Notes = append(p.Notes, "1999 edition: with a single location take at least three samples there")
	}
	if adv := AdviseSequential(p.LimitAtLargestPerM3, t.FlowLPM); adv.Suggested {
		p.Sequential = &adv
		p.Notes = append(p.Notes, adv.Reason)
	}
	return p, nil
}

// SizeRatioMin is the least ratio between consecutive considered sizes:
// each larger size at least 1.5 times the next smaller (ISO 14644-1:2015
// clause 4, from memory).
const SizeRatioMin = 1.5

// closeSizes warns about consecutive considered sizes closer than
// SizeRatioMin; the rule is recalled, so it warns rather than refuses.
func closeSizes(sizes []float64) []string {
	var out []string
	for i := 1; i < len(sizes); i++ {
		if sizes[i]/sizes[i-1] < SizeRatioMin*(1-1e-9) {
			out = append(out, fmt.Sprintf("considered sizes %s µm and %s µm are closer than %v× each other (ISO 14644-1:2015 clause 4, from memory: each larger size at least 1.5 times the next smaller)",
				FormatSize(sizes[i-1]), FormatSize(sizes[i]), SizeRatioMin))
		}
	}
	return out
}
