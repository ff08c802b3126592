package classify

import (
	"fmt"
	"math"
	"sort"
)

// Sequential sampling, ISO 14644-1:2015 Annex D (1999 Annex F). The
// running cumulative count is compared with two lines in E, the count
// expected at the class limit for the air sampled so far: the upper line
// 3.96 + 1.03·E and the lower line −3.96 + 1.03·E; sampling stops at
// E = 20, where the count is compared with the limit. From memory: check
// the lines against the standard before relying on them.
const (
	SequentialIntercept    = 3.96
	SequentialSlope        = 1.03
	SequentialStopExpected = 20.0
)

// SequentialLines returns the lower and upper decision lines at an
// expected count.
func SequentialLines(expected float64) (lower, upper float64) {
	return -SequentialIntercept + SequentialSlope*expected, SequentialIntercept + SequentialSlope*expected
}

// SequentialStep is one point of a running sequential sample: the air
// sampled so far and the particles counted in it, both cumulative.
type SequentialStep struct {
	VolumeL float64
	Count   uint64
}

// SequentialResult tells where a sequential sample stopped and why.
type SequentialResult struct {
	Decision string  `json:"decision"` // Pass, Fail, or Incomplete when the data ended between the lines
	Reason   string  `json:"reason"`
	Step     int     `json:"step"` // 1-based index of the point where it stopped (the last point when undecided)
	VolumeL  float64 `json:"volume_l"`
	Count    uint64  `json:"count"`
	Expected float64 `json:"expected"`
	Lower    float64 `json:"lower"`
	Upper    float64 `json:"upper"`
}

// SequentialDecide walks the running count against the lines for a limit
// in particles/m³ and stops at the first point that decides: above the
// upper line is a fail, below the lower line a pass, and once E reaches 20
// the count is compared with E (the limit for that volume). Steps must
// have growing volumes and counts that do not fall.
func SequentialDecide(limitPerM3 float64, steps []SequentialStep) (SequentialResult, error) {
	if !(limitPerM3 > 0) || math.IsInf(limitPerM3, 0) {
		return SequentialResult{}, fmt.Errorf("%w: sequential sampling needs a positive limit, got %v", ErrStats, limitPerM3)
	}
	if len(steps) == 0 {
		return SequentialResult{}, fmt.Errorf("%w: sequential sampling needs at least one point", ErrStats)
	}
	for i, s := range steps {
		if !(s.VolumeL > 0) || math.IsInf(s.VolumeL, 0) || (i > 0 && (s.VolumeL <= steps[i-1].VolumeL || s.Count < steps[i-1].Count)) {
			return SequentialResult{}, fmt.Errorf("%w: point %d: volume %v L, count %d: volumes must grow and counts must not fall", ErrStats, i+1, s.VolumeL, s.Count)
		}
	}
	var r SequentialResult
	for i, s := range steps {
		e := limitPerM3 * s.VolumeL / 1000
		lo, up := SequentialLines(e)
		r = SequentialResult{Step: i + 1, VolumeL: s.VolumeL, Count: s.Count, Expected: e, Lower: lo, Upper: up}
		n := float64(s.Count)
		switch {
		case n > up:
			r.Decision, r.Reason = Fail, fmt.Sprintf("count %d above the upper line %.2f at E = %.2f", s.Count, up, e)
			return r, nil
		case n < lo:
			r.Decision, r.Reason = Pass, fmt.Sprintf("count %d below the lower line %.2f at E = %.2f", s.Count, lo, e)
			return r, nil
		case e >= SequentialStopExpected:
			if n <= e {
				r.Decision, r.Reason = Pass, fmt.Sprintf("E reached %.2f with count %d: within the limit", e, s.Count)
			} else {
				r.Decision, r.Reason = Fail, fmt.Sprintf("E reached %.2f with count %d: above the limit", e, s.Count)
			}
			return r, nil
		}
	}
	r.Decision = Incomplete
	r.Reason = fmt.Sprintf("count %d stays between the lines at E = %.2f (of %v): sample more air", r.Count, r.Expected, SequentialStopExpected)
	return r, nil
}

// judgeSequential decides a location at every judged size from its
// samples in time order (in file order when a sample has no time).
func (c *certification) judgeSequential(lr *LocationResult, ss []Sample) {
	ord := append([]Sample(nil), ss...)
	timed := true
	for _, s := range ord {
		timed = timed && !s.Time.IsZero()
	}
	if timed {
		sort.SliceStable(ord, func(i, j int) bool { return ord[i].Time.Before(ord[j].Time) })
	}
	lr.Sequential = map[string]SequentialResult{}
	for i, l := range c.limits {
		if !l.Specified {
			continue
		}
		key := c.sizes[i]
		steps := make([]SequentialStep, len(ord))
		var v float64
		var n uint64
		for j, s := range ord {
			v += s.VolumeL
			n += s.Counts[i]
			steps[j] = SequentialStep{VolumeL: v, Count: n}
		}
		res, _ := SequentialDecide(l.PerM3, steps) // volumes positive and growing, counts summed: cannot fail
		lr.Sequential[key] = res
		switch res.Decision {
		case Fail:
			f := false
			lr.PassBySize[key] = &f
			lr.Pass = false
			c.fail("location %s at ≥%s µm: sequential sampling stopped at %s L: %s (ISO 14644-1:2015 Annex D)", lr.ID, key, fmtNum(res.VolumeL), res.Reason)
		case Pass:
			t := true
			lr.PassBySize[key] = &t
		default:
			lr.Pass = false
			c.incomplete("location %s at ≥%s µm: sequential sampling undecided after %s L: %s", lr.ID, key, fmtNum(res.VolumeL), res.Reason)
		}
	}
}

// SequentialAdvice says whether sequential sampling is worth it for a
// plan and what it saves when the zone is clean.
type SequentialAdvice struct {
	Suggested bool `json:"suggested"`
	// FullMinutes is the time to draw the single sample volume.
	FullMinutes float64 `json:"full_minutes"`
	// EarliestPassMinutes is the shortest sequential sample: with no
	// particle counted, the count falls below the lower line once
	// E > 3.96/1.03 ≈ 3.84, a fifth of the 20 particles of V_s.
	EarliestPassMinutes float64 `json:"earliest_pass_minutes"`
	SavedMinutes        float64 `json:"saved_minutes"`
	Reason              string  `json:"reason"`
}

// SequentialAdviceMinutes is the single-sample time above which the plan
// suggests sequential sampling: half an hour per location (common
// practice, no source).
const SequentialAdviceMinutes = 30.0

// AdviseSequential compares the single sample time at the limit of the
// largest considered size with the earliest sequential pass.
func AdviseSequential(limitAtLargestPerM3, flowLPM float64) SequentialAdvice {
	full := SampleMinutes(SampleVolumeL(limitAtLargestPerM3), flowLPM)
	eMin := SequentialIntercept / SequentialSlope
	early := SampleMinutes(eMin/limitAtLargestPerM3*1000, flowLPM)
	a := SequentialAdvice{FullMinutes: CeilTo(full, 2), EarliestPassMinutes: CeilTo(early, 2)}
	a.SavedMinutes = math.Max(0, a.FullMinutes-a.EarliestPassMinutes)
	if full > SequentialAdviceMinutes {
		a.Suggested = true
		a.Reason = fmt.Sprintf("each sample takes %.1f min at %s L/min; sequential sampling (ISO 14644-1:2015 Annex D) can stop a clean location after %.1f min, saving up to %.1f min per location",
			a.FullMinutes, fmtNum(flowLPM), a.EarliestPassMinutes, a.SavedMinutes)
	} else {
		a.Reason = fmt.Sprintf("each sample takes %.1f min, not more than %.0f min: sequential sampling would save little", a.FullMinutes, SequentialAdviceMinutes)
	}
	return a
}
