package alerts

import (
	"fmt"
	"math"
	"sort"
	"strings"
)

// LevelMethod names how SuggestLevels derives levels from history.
type LevelMethod string

// Methods of SuggestLevels.
const (
	// LevelsByPercentile: the alert level is the 95th and the action level
	// the 99th percentile of the per-sample concentrations, each the
	// empirical percentile (the smallest observed value with at least that
	// share of the samples at or below it), so a level is a concentration
	// that was actually seen. It assumes nothing about the distribution,
	// which for particles is skewed. The default.
	LevelsByPercentile LevelMethod = "percentile"
	// LevelsByMeanSD: alert = mean + 2 s, action = mean + 3 s, s the sample
	// standard deviation: the usual control-chart spread, apt only when the
	// concentrations are roughly normal (high counts, a steady process).
	LevelsByMeanSD LevelMethod = "mean-sd"
)

// MinLevelSamples is the history below which SuggestLevels warns that its
// levels are unsteady: a 99th percentile of fewer than 100 samples is
// simply the largest one (common practice, no source).
const MinLevelSamples = 100

// LevelAdvice is a suggestion of alert and action levels for one location
// (or zone) and size, with what it rests on. ISO 14644-2:2015 asks that
// levels be set from data of the installation and sit at or below the
// class limit; the advice is never above the limit and never below the
// history's mean, and it is advice: an engineer sets the levels.
type LevelAdvice struct {
	Method  LevelMethod `json:"method"`
	Samples int         `json:"samples"`
	Skipped int         `json:"skipped"`
	// MeanPerM3 is the history's mean concentration (0 with no samples).
	MeanPerM3 float64 `json:"mean_per_m3"`
	// Alert and Action are the suggested levels, particles/m³; nil where
	// the history cannot give one (then the configuration default holds:
	// action at the limit, no alert level).
	Alert  *float64 `json:"alert_per_m3"`
	Action *float64 `json:"action_per_m3"`
	// Limit is the class or grade limit the levels were capped at; nil
	// when none was given.
	Limit   *float64 `json:"limit_per_m3"`
	Caveats []string `json:"caveats"`
}

// Levels turns the advice into a zone configuration's levels.
func (a LevelAdvice) Levels() Levels {
	cp := func(p *float64) *float64 {
		if p == nil {
			return nil
		}
		v := *p
		return &v
	}
	return Levels{Alert: cp(a.Alert), Action: cp(a.Action)}
}

// SuggestLevels derives alert and action levels from a history of
// per-sample concentrations (particles/m³ at one size) and the class or
// grade limit there (0 or less, NaN or infinite: no limit). method is
// LevelsByPercentile when left out. Values that are no concentrations are
// skipped and named in a caveat; an unknown method falls back to the
// default, with a caveat.
//
// Then, in this order: the alert level is raised to the mean if below it
// (a level under the centre would alarm on half of all samples); the
// action level to the alert level; each is capped at the limit; an action
// level of 0 (a history without particles) is no level, and the limit
// stands.
func SuggestLevels(history []float64, limit float64, method ...LevelMethod) LevelAdvice {
	adv := LevelAdvice{Method: LevelsByPercentile, Caveats: []string{}}
	if len(method) > 0 {
		switch method[0] {
		case LevelsByPercentile, LevelsByMeanSD:
			adv.Method = method[0]
		default:
			adv.Caveats = append(adv.Caveats, fmt.Sprintf("unknown method %q: %s used", method[0], LevelsByPercentile))
		}
	}
	hasLimit := limit > 0 && !math.IsInf(limit, 0)
	if hasLimit {
		l := limit
		adv.Limit = &l
	} else {
		adv.Caveats = append(adv.Caveats, fmt.Sprintf("no class or grade limit (%v): the levels are not capped", limit))
	}
	vals := make([]float64, 0, len(history))
	var bad []string
	for i, v := range history {
		if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
			adv.Skipped++
			if len(bad) < 5 {
				bad = append(bad, fmt.Sprintf("[%d] %v", i, v))
			}
			continue
		}
		vals = append(vals, v)
	}
	if adv.Skipped > 0 {
		adv.Caveats = append(adv.Caveats, fmt.Sprintf("%d values are no concentrations and were skipped: %s", adv.Skipped, strings.Join(bad, ", ")))
	}
	adv.Samples = len(vals)
	if adv.Samples == 0 {
		adv.Caveats = append(adv.Caveats, "no history: no levels can be derived; the action level stays at the limit")
		if hasLimit {
			l := limit
			adv.Action = &l
		}
		return adv
	}
	if adv.Samples < MinLevelSamples {
		adv.Caveats = append(adv.Caveats, fmt.Sprintf("only %d samples (fewer than %d): the levels are unsteady; derive them again from more history", adv.Samples, MinLevelSamples))
	}
	sort.Float64s(vals)
	var sum float64
	for _, v := range vals {
		sum += v
	}
	mean := sum / float64(len(vals))
	adv.MeanPerM3 = mean

	var alert, action float64
	switch adv.Method {
	case LevelsByMeanSD:
		sd := 0.0
		if len(vals) > 1 {
			var ss float64
			for _, v := range vals {
				ss += (v - mean) * (v - mean)
			}
			sd = math.Sqrt(ss / float64(len(vals)-1))
		} else {
			adv.Caveats = append(adv.Caveats, "one sample has no spread: both levels are its value")
		}
		alert, action = mean+2*sd, mean+3*sd
	default:
		alert, action = empiricalQuantile(vals, 0.95), empiricalQuantile(vals, 0.99)
	}
	if alert < mean {
		alert = mean
		adv.Caveats = append(adv.Caveats, "the alert level was raised to the history's mean")
	}
	if action < alert {
		action = alert
	}
	if hasLimit {
		if mean > limit {
			adv.Caveats = append(adv.Caveats, fmt.Sprintf("the history's mean %s /m³ is above the limit %s /m³: the zone did not meet its class or grade then, and levels from it would hide that", num(mean), num(limit)))
		}
		if alert > limit {
			alert = limit
			adv.Caveats = append(adv.Caveats, "the alert level was capped at the limit")
		}
		if action > limit {
			action = limit
			adv.Caveats = append(adv.Caveats, "the action level was capped at the limit")
		}
	}
	adv.Alert = &alert
	if action > 0 {
		adv.Action = &action
	} else {
		adv.Caveats = append(adv.Caveats, "no particles in the history: an action level of 0 is no level; the action level stays at the limit")
		if hasLimit {
			l := limit
			adv.Action = &l
		}
	}
	if adv.Action != nil && *adv.Action == alert {
		adv.Caveats = append(adv.Caveats, "the alert and action levels coincide: the history does not separate an early warning from an action")
	}
	return adv
}

// empiricalQuantile is the smallest of the sorted values with at least the
// share p of them at or below it.
func empiricalQuantile(sorted []float64, p float64) float64 {
	target := p * float64(len(sorted))
	for i, v := range sorted {
		if float64(i+1) >= target {
			return v
		}
	}
	return sorted[len(sorted)-1]
}
