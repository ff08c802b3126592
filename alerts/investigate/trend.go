package investigate

import (
	"math"
	"slices"
	"strings"
	"time"
)

// Percentile is the empirical p-quantile of the ascending values sorted,
// by the nearest-rank method: the ⌈p·n⌉-th smallest value (the first for
// p = 0), the smallest observed value with at least the fraction p of the
// values at or below it. It never interpolates, so it is always a value
// that was measured. NaN for no values or p outside [0, 1].
func Percentile(sorted []float64, p float64) float64 {
	n := len(sorted)
	if n == 0 || p < 0 || p > 1 || math.IsNaN(p) {
		return math.NaN()
	}
	rank := int(math.Ceil(p * float64(n)))
	if rank < 1 {
		rank = 1
	}
	return sorted[rank-1]
}

// Levels are the concentrations (particles/m³) a location is judged
// against at one size; zero is a level not set.
type Levels struct {
	Alert, Action, Class float64
}

// Stats summarise the samples of one location and size over a span. The
// Over counts are samples strictly above each level (a sample at a limit
// is within it, as in ISO 14644-1); they are zero for a level not set.
type Stats struct {
	N                                int
	Mean, P95, P99, Max              float64
	OverAlert, OverAction, OverClass int
}

// Summarise computes Stats of values against lv; with no values the
// figures are NaN, never zero.
func Summarise(values []float64, lv Levels) Stats {
	st := Stats{N: len(values), Mean: math.NaN(), P95: math.NaN(), P99: math.NaN(), Max: math.NaN()}
	if len(values) == 0 {
		return st
	}
	s := slices.Clone(values)
	slices.Sort(s)
	sum := 0.0
	for _, v := range s {
		sum += v
		over := func(level float64, n *int) {
			if level > 0 && v > level {
				*n++
			}
		}
		over(lv.Alert, &st.OverAlert)
		over(lv.Action, &st.OverAction)
		over(lv.Class, &st.OverClass)
	}
	st.Mean = sum / float64(len(s))
	st.P95, st.P99, st.Max = Percentile(s, 0.95), Percentile(s, 0.99), s[len(s)-1]
	return st
}

// TrendSeries is one location and size over both months, with its levels.
type TrendSeries struct {
	Location string
	SizeUM   float64
	Levels   Levels
	Points   []Point
}

// MonthInput is what a month's trend is computed from. Month is any
// moment of the month, taken in Loc (UTC when nil) so that months and
// days follow the site's calendar. Series, Alarms, Doors and Levels may
// reach into the previous month: that month is the comparison.
type MonthInput struct {
	Zone   string
	Month  time.Time
	Loc    *time.Location
	Series []TrendSeries
	Alarms []Alarm
	Doors  []DoorOpening
	Levels []LevelChange
}

// LocationTrend is one location and size in the month and the month before.
type LocationTrend struct {
	Location       string
	SizeUM         float64
	Levels         Levels
	This, Previous Stats
}

// KindLevelCount is the number of alarms of one kind and level that began
// in the month and in the month before.
type KindLevelCount struct {
	Kind, Level    string
	This, Previous int
}

// DayCount is the door openings that began on one day of the month.
type DayCount struct {
	Day   time.Time
	Count int
}

// MonthTrend is a zone's month on one page.
type MonthTrend struct {
	Zone                             string
	From, To                         time.Time // the month, [From, To)
	PreviousFrom                     time.Time // the month before is [PreviousFrom, From)
	Locations                        []LocationTrend
	Alarms                           []KindLevelCount
	AlarmsThis, AlarmsPrevious       int
	DoorsPerDay                      []DayCount // every day of the month, zeros included
	DoorsThis, DoorsPrevious         int
	TimeByLevel, PreviousTimeByLevel map[string]time.Duration
}

// Month computes the month's trend. The part of the month after now is
// left out of the time by level (it has not happened), not counted as
// unknown.
func Month(in MonthInput, now time.Time) MonthTrend {
	loc := in.Loc
	if loc == nil {
		loc = time.UTC
	}
	m := in.Month.In(loc)
	from := time.Date(m.Year(), m.Month(), 1, 0, 0, 0, 0, loc)
	to, prev := from.AddDate(0, 1, 0), from.AddDate(0, -1, 0)
	tr := MonthTrend{Zone: in.Zone, From: from, To: to, PreviousFrom: prev}
	in2 := func(t, a, b time.Time) bool { return !t.Before(a) && t.Before(b) }
	for _, s := range in.Series {
		var this, before []float64
		for _, p := range s.Points {
			switch {
			case in2(p.Time, from, to):
				this = append(this, p.Value)
			case in2(p.Time, prev, from):
				before = append(before, p.Value)
			}
		}
		tr.Locations = append(tr.Locations, LocationTrend{Location: s.Location, SizeUM: s.SizeUM, Levels: s.Levels,
			This: Summarise(this, s.Levels), Previous: Summarise(before, s.Levels)})
	}
	tr.Alarms, tr.AlarmsThis, tr.AlarmsPrevious = alarmCounts(in.Alarms, in.Zone, prev, from, to)
	for d := from; d.Before(to); d = d.AddDate(0, 0, 1) {
		tr.DoorsPerDay = append(tr.DoorsPerDay, DayCount{Day: d})
	}
	for _, o := range in.Doors {
		switch {
		case in2(o.Start, from, to):
			tr.DoorsThis++
			tr.DoorsPerDay[o.Start.In(loc).Day()-1].Count++
		case in2(o.Start, prev, from):
			tr.DoorsPrevious++
		}
	}
	tr.TimeByLevel = TimeByLevel(in.Levels, from, minTime(to, now))
	tr.PreviousTimeByLevel = TimeByLevel(in.Levels, prev, minTime(from, now))
	return tr
}

func minTime(a, b time.Time) time.Time {
	if b.Before(a) {
		return b
	}
	return a
}

// alarmCounts counts the zone's alarms by kind and level by the month in
// which they began, sorted by kind then level.
func alarmCounts(alarms []Alarm, zone string, prev, from, to time.Time) ([]KindLevelCount, int, int) {
	idx := map[[2]string]int{}
	var out []KindLevelCount
	this, before := 0, 0
	for _, a := range alarms {
		if a.Zone != zone || a.Since.Before(prev) || !a.Since.Before(to) {
			continue
		}
		k := [2]string{a.Kind, a.Level}
		i, ok := idx[k]
		if !ok {
			i = len(out)
			idx[k] = i
			out = append(out, KindLevelCount{Kind: a.Kind, Level: a.Level})
		}
		if a.Since.Before(from) {
			out[i].Previous++
			before++
		} else {
			out[i].This++
			this++
		}
	}
	slices.SortFunc(out, func(a, b KindLevelCount) int {
		if c := strings.Compare(a.Kind, b.Kind); c != 0 {
			return c
		}
		return strings.Compare(a.Level, b.Level)
	})
	return out, this, before
}
