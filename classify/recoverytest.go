package classify

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"time"
)

// ErrRecovery reports a series from which no recovery rate can be fitted.
var ErrRecovery = errors.New("no recovery rate")

// RecoveryPoint is one concentration of a recovery series.
type RecoveryPoint struct {
	Time   time.Time `json:"time"`
	Minute float64   `json:"minute"` // since the first point of the series
	PerM3  float64   `json:"per_m3"`
	Used   bool      `json:"used"` // part of the fitted decay
}

// RecoveryTest is an ISO 14644-3 recovery test on a timed series at one
// size: the fit, the floor it stopped at and every point with whether the
// fit used it. Its JSON is what `cleanmon recovery --format json` and the
// recovery route answer.
type RecoveryTest struct {
	SizeUM      string    `json:"size_um"`
	TargetClass *float64  `json:"target_class,omitempty"`
	FloorPerM3  float64   `json:"floor_per_m3"`
	Start       time.Time `json:"start"`
	Recovery
	Series []RecoveryPoint `json:"series"`
}

// FitRecoveryTest fits the log-linear decay of a series of concentrations
// at one size, in time order (RecoveryFit). With a target class the fit
// stops before the first point at or below the class limit at that size
// (ISO 14644-1:2015), where the decay flattens into the room's background.
func FitRecoveryTest(times []time.Time, perM3 []float64, sizeUM float64, targetClass *float64) (RecoveryTest, error) {
	a := RecoveryTest{SizeUM: FormatSize(sizeUM), TargetClass: targetClass, Series: []RecoveryPoint{}}
	if len(times) == 0 || len(times) != len(perM3) {
		return a, fmt.Errorf("%w: %d times and %d concentrations", ErrRecovery, len(times), len(perM3))
	}
	if targetClass != nil {
		l, err := ISOLimit(*targetClass, sizeUM, Edition2015)
		if err != nil {
			return a, fmt.Errorf("%w: target class: %v", ErrRecovery, err)
		}
		if !l.Specified {
			return a, fmt.Errorf("%w: ISO %s has no limit at %s µm: %s", ErrRecovery, FormatClass(*targetClass), a.SizeUM, l.Note)
		}
		a.FloorPerM3 = l.PerM3
	}
	a.Start = times[0].UTC()
	mins := make([]float64, len(times))
	for i, t := range times {
		mins[i] = t.Sub(times[0]).Minutes()
		a.Series = append(a.Series, RecoveryPoint{Time: t.UTC(), Minute: math.Round(mins[i]*1000) / 1000, PerM3: perM3[i]})
	}
	r, err := RecoveryFit(mins, perM3, a.FloorPerM3)
	if err != nil {
		return a, fmt.Errorf("%w: %v", ErrRecovery, err)
	}
	a.Recovery = r
	for i := range a.Series {
		a.Series[i].Used = mins[i] >= r.FromMin && mins[i] <= r.ToMin
	}
	return a, nil
}

// RecoverySeries picks the samples of one location (any spelling of its
// id; "" when the samples hold only one) and returns their times and
// concentrations at the first size, in time order. Every sample needs a
// time, and no two the same: a recovery rate is per minute.
func RecoverySeries(samples []Sample, loc string) ([]time.Time, []float64, error) {
	var picked []Sample
	seen := map[string]bool{}
	for _, s := range samples {
		seen[s.Location] = true
		if loc == "" || strings.EqualFold(s.Location, loc) {
			picked = append(picked, s)
		}
	}
	switch {
	case loc == "" && len(seen) > 1:
		return nil, nil, fmt.Errorf("%w: the samples hold %d locations: a recovery test is of one location; give the location", ErrSamples, len(seen))
	case len(picked) == 0:
		return nil, nil, fmt.Errorf("%w: no samples of location %q", ErrSamples, loc)
	}
	for _, s := range picked {
		if s.Time.IsZero() {
			return nil, nil, fmt.Errorf("%w: %s, field time: a recovery test needs the time of every sample", ErrSamples, s.Ref)
		}
	}
	sort.SliceStable(picked, func(i, j int) bool { return picked[i].Time.Before(picked[j].Time) })
	times := make([]time.Time, len(picked))
	conc := make([]float64, len(picked))
	for i, s := range picked {
		if i > 0 && !s.Time.After(times[i-1]) {
			return nil, nil, fmt.Errorf("%w: %s, field time: %s repeats an earlier sample's time", ErrSamples, s.Ref, s.Time.UTC().Format(time.RFC3339))
		}
		times[i], conc[i] = s.Time, PerCubicMetre(s.Counts[0], s.VolumeL)
	}
	return times, conc, nil
}
