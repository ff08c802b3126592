package classify

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// ErrSamples reports samples that cannot be evaluated.
var ErrSamples = errors.New("classify: invalid samples")

// Sample is one single sample volume drawn at a location: cumulative counts
// (particles at or above each size) aligned with Target.Sizes.
type Sample struct {
	Location string
	Time     time.Time // zero when not recorded
	VolumeL  float64
	Counts   []uint64
	Ref      string // where the sample came from, for messages ("samples.csv line 7")
}

// Verdicts.
const (
	Pass = "pass"
	Fail = "fail"
)

// LocationResult is the evaluation of one sampling location.
type LocationResult struct {
	ID           string             `json:"id"`
	Samples      int                `json:"samples"`
	VolumeL      float64            `json:"volume_l"`
	MeanPerM3    map[string]float64 `json:"mean_per_m3"`
	Upper95PerM3 map[string]float64 `json:"poisson_upper95_per_m3"`
	PassBySize   map[string]*bool   `json:"pass_by_size"`
	Pass         bool               `json:"pass"`
}

// Report is the outcome of certifying a zone. Its JSON form is the
// `certify --format json` schema (DESIGN.md §4).
type Report struct {
	Verdict           string              `json:"verdict"`
	Class             *float64            `json:"class"`
	Grade             *string             `json:"grade"`
	Edition           Edition             `json:"edition"`
	State             string              `json:"state"`
	AreaM2            float64             `json:"area_m2"`
	Sizes             []string            `json:"sizes_um"`
	RequiredLocations int                 `json:"required_locations"`
	Locations         []LocationResult    `json:"locations"`
	LimitsPerM3       map[string]*float64 `json:"limits_per_m3"`
	UCL95PerM3        map[string]float64  `json:"ucl95_per_m3,omitempty"`
	AchievedClass     *float64            `json:"achieved_class"`
	Problems          []string            `json:"problems"`
	Warnings          []string            `json:"warnings"`
	Plan              Plan                `json:"plan"`
	SamplesFrom       *time.Time          `json:"samples_from,omitempty"`
	SamplesTo         *time.Time          `json:"samples_to,omitempty"`
}

// Certify evaluates samples against a target. Bad input (no samples, a
// sample whose counts do not match the sizes, a non-positive volume,
// cumulative counts that increase with size, a blank cell not allowed) is an
// error; everything that makes the zone fail is a problem in the report,
// all of them listed, not only the first:
//
//   - fewer locations than the plan requires;
//   - a sample smaller than the single sample volume, or a 1999 single
//     location with fewer than three samples, or grade A below 1 m³ per
//     location;
//   - a location mean above the limit at any judged size (each location's
//     mean is the average of its samples' concentrations, ISO 14644-1:2015
//     A.5.2);
//   - for the 1999 edition with 2 to 9 locations, the 95 % UCL of the
//     location means above the limit (Annex C).
func Certify(t Target, samples []Sample) (Report, error) {
	plan, err := MakePlan(t)
	if err != nil {
		return Report{}, err
	}
	limits, _, _ := t.normalise() // cannot fail: MakePlan succeeded on the same target
	if len(samples) == 0 {
		return Report{}, fmt.Errorf("%w: no samples", ErrSamples)
	}
	sizes := make([]string, len(limits))
	for i, l := range limits {
		sizes[i] = FormatSize(l.SizeUM)
	}
	// Group by location, keeping the order in which locations first appear.
	var order []string
	byLoc := map[string][]Sample{}
	var first, last time.Time
	for i, s := range samples {
		ref := s.Ref
		if ref == "" {
			ref = fmt.Sprintf("sample %d", i)
		}
		if s.Location == "" {
			return Report{}, fmt.Errorf("%w: %s: location is empty", ErrSamples, ref)
		}
		if !(s.VolumeL > 0) || math.IsInf(s.VolumeL, 0) {
			return Report{}, fmt.Errorf("%w: %s: volume %v L must be positive", ErrSamples, ref, s.VolumeL)
		}
		if len(s.Counts) != len(limits) {
			return Report{}, fmt.Errorf("%w: %s: %d counts for %d sizes", ErrSamples, ref, len(s.Counts), len(limits))
		}
		if j, bad := CheckCumulative(s.Counts); bad {
			return Report{}, fmt.Errorf("%w: %s: cumulative count at %s µm (%d) is above the count at %s µm (%d)",
				ErrSamples, ref, sizes[j], s.Counts[j], sizes[j-1], s.Counts[j-1])
		}
		if _, ok := byLoc[s.Location]; !ok {
			order = append(order, s.Location)
		}
		byLoc[s.Location] = append(byLoc[s.Location], s)
		if !s.Time.IsZero() {
			if first.IsZero() || s.Time.Before(first) {
				first = s.Time
			}
			if s.Time.After(last) {
				last = s.Time
			}
		}
	}

	r := Report{
		Edition: plan.Edition, State: plan.State, AreaM2: plan.AreaM2, Sizes: sizes,
		RequiredLocations: plan.Locations, LimitsPerM3: plan.LimitsPerM3,
		Problems: []string{}, Warnings: append([]string{}, plan.Notes...), Plan: plan,
	}
	if plan.Class != nil {
		c := *plan.Class
		r.Class = &c
	} else {
		g := plan.Grade
		r.Grade = &g
	}
	if !first.IsZero() {
		f, l := first.UTC(), last.UTC()
		r.SamplesFrom, r.SamplesTo = &f, &l
	}

	if len(order) < plan.Locations {
		r.Problems = append(r.Problems, fmt.Sprintf("%d locations sampled; the plan for %s m² needs at least %d (ISO 14644-1:%s)",
			len(order), FormatSize(plan.AreaM2), plan.Locations, plan.Edition))
	}
	minVol := SampleVolumeL(plan.LimitAtLargestPerM3)

	means := make([][]float64, len(limits)) // per size, per location
	for _, id := range order {
		ss := byLoc[id]
		lr := LocationResult{ID: id, Samples: len(ss), MeanPerM3: map[string]float64{},
			Upper95PerM3: map[string]float64{}, PassBySize: map[string]*bool{}, Pass: true}
		total := make([]uint64, len(limits))
		sum := make([]float64, len(limits))
		for _, s := range ss {
			lr.VolumeL += s.VolumeL
			if s.VolumeL < minVol*(1-1e-9) {
				ref := s.Ref
				if ref == "" {
					ref = "a sample"
				}
				r.Problems = append(r.Problems, fmt.Sprintf("location %s, %s: %s L is below the single sample volume %s L",
					id, ref, fmtNum(s.VolumeL), fmtNum(plan.SampleVolumeL)))
				lr.Pass = false
			}
			for i, c := range s.Counts {
				total[i] += c
				sum[i] += PerCubicMetre(c, s.VolumeL)
			}
		}
		lr.VolumeL = math.Round(lr.VolumeL*1000) / 1000
		if len(ss) < plan.MinSamplesPerLocation {
			r.Problems = append(r.Problems, fmt.Sprintf("location %s: %d samples; the plan needs at least %d", id, len(ss), plan.MinSamplesPerLocation))
			lr.Pass = false
		}
		if plan.MinVolumePerLocationL > 0 && lr.VolumeL < plan.MinVolumePerLocationL {
			r.Problems = append(r.Problems, fmt.Sprintf("location %s: %s L sampled; grade A classification needs at least %s L per location",
				id, fmtNum(lr.VolumeL), fmtNum(plan.MinVolumePerLocationL)))
			lr.Pass = false
		}
		for i, l := range limits {
			key := sizes[i]
			m := sum[i] / float64(len(ss))
			lr.MeanPerM3[key] = m
			up, _ := PoissonUpper(total[i], 0.95)
			lr.Upper95PerM3[key] = up * 1000 / lr.VolumeL
			means[i] = append(means[i], m)
			if !l.Specified {
				continue
			}
			ok := m <= l.PerM3
			lr.PassBySize[key] = &ok
			if !ok {
				lr.Pass = false
				r.Problems = append(r.Problems, fmt.Sprintf("location %s: mean %s /m³ at ≥%s µm exceeds the limit %s /m³",
					id, fmtNum(m), key, fmtNum(l.PerM3)))
			}
		}
		r.Locations = append(r.Locations, lr)
	}

	if ucl := needsUCL(plan.Edition, len(order)); ucl {
		r.UCL95PerM3 = map[string]float64{}
		for i, l := range limits {
			u, err := UCL95(means[i])
			if err != nil {
				return Report{}, err
			}
			r.UCL95PerM3[sizes[i]] = u
			if l.Specified && u > l.PerM3 {
				r.Problems = append(r.Problems, fmt.Sprintf("95 %% UCL of the %d location means at ≥%s µm is %s /m³, above the limit %s /m³ (ISO 14644-1:1999 Annex C)",
					len(order), sizes[i], fmtNum(u), fmtNum(l.PerM3)))
			}
		}
	}
	r.AchievedClass = achievedClass(limits, means, r.UCL95PerM3, sizes)
	r.Verdict = Pass
	if len(r.Problems) > 0 {
		r.Verdict = Fail
	}
	return r, nil
}

// needsUCL tells whether the edition asks for the 95 % UCL: only the 1999
// edition, and only for 2 to 9 locations.
func needsUCL(ed Edition, locations int) bool {
	return ed == Edition1999 && locations >= 2 && locations <= 9
}

// achievedClass is the cleanest ISO class, in 0.1 steps, whose formula
// limits (with the tables' rounding) every location mean, and the UCL
// where the edition uses it, meets at the considered sizes. It is a margin
// figure: cells that Table 1 leaves blank are still judged by the formula.
func achievedClass(limits []SizeLimit, means [][]float64, ucl map[string]float64, sizes []string) *float64 {
	for k := 10; k <= 90; k++ {
		n := float64(k) / 10
		ok := true
		for i, l := range limits {
			lim := RoundLimit(FormulaConcentration(n, l.SizeUM))
			for _, m := range means[i] {
				if m > lim {
					ok = false
				}
			}
			if u, has := ucl[sizes[i]]; has && u > lim {
				ok = false
			}
		}
		if ok {
			return &n
		}
	}
	return nil
}

// fmtNum writes a concentration or volume compactly for messages.
func fmtNum(v float64) string {
	switch {
	case v >= 100:
		return fmt.Sprintf("%.0f", v)
	case v >= 10:
		return fmt.Sprintf("%.1f", v)
	default:
		return fmt.Sprintf("%.2f", v)
	}
}
