package alerts

import (
	"fmt"
	"math"
	"time"
)

// The count rule at ≥5 µm in grade A, and in grade B at rest.
//
// There the limit is a few particles per cubic metre, so one particle in a
// 28.3 L sample is above it, and single counts are often false counts
// (electronic noise, a particle shed by the counter's own tubing). EU GMP
// Annex 1 (2022) asks that consecutive or regular counts at low levels be
// investigated, not that each single count be an action (from memory). So
// in these series a single sample above the action level raises an alert
// excursion, and the action is the count rule: CountRuleCounts particles
// or more counted within the last CountRuleSamples samples (defaults 2
// within 3: two samples in a row with one particle each, or one sample
// with two; common practice, no source). It is an alarm of kind
// consecutive, in place of the run rule above the alert level.

// Defaults of the count rule.
const (
	DefaultCountRuleCounts  = 2
	DefaultCountRuleSamples = 3
)

// countRuleApplies says whether a zone's ≥5 µm series are judged by the
// count rule under the limits of the given operating state.
func (e *Engine) countRuleApplies(z *engineZone, limitsState string) bool {
	return z.grade == "A" || z.grade == "B" && limitsState == AtRest
}

// judgeCounts adds a sample's particle count to the series' recent counts
// and judges the count rule.
func (e *Engine) judgeCounts(t *txn, k string, s seriesState, tmpl Alarm, where func() string, r *CounterReading) seriesState {
	count := math.Round(tmpl.Value * r.VolumeL / 1000)
	// A new slice each time: the old state stays intact for the undo.
	recent := make([]countPoint, 0, e.countSamples)
	if n := len(s.recent); n >= e.countSamples {
		recent = append(recent, s.recent[n-e.countSamples+1:]...)
	} else {
		recent = append(recent, s.recent...)
	}
	recent = append(recent, countPoint{t: r.Time, n: count})
	s.recent = recent
	var sum float64
	var first time.Time
	for _, p := range recent {
		if p.n > 0 && first.IsZero() {
			first = p.t
		}
		sum += p.n
	}
	a := tmpl
	a.Kind, a.Value, a.Threshold, a.Unit = KindConsecutive, sum, float64(e.countCounts), "particles"
	present := sum >= float64(e.countCounts)
	samples := len(recent)
	msg := func() string {
		rel := "below"
		if present {
			rel = "at or above"
		}
		return fmt.Sprintf("%s: %g particles counted in the last %d samples, %s the %d that call for action", where(), sum, samples, rel, e.countCounts)
	}
	t.judge(condition{key: k + ":" + KindConsecutive, present: present, level: LevelAction, tmpl: a, since: first, at: r.Time, msg: msg})
	return s
}

type countPoint struct {
	t time.Time
	n float64
}
