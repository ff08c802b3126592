package investigate

import (
	"cmp"
	"fmt"
	"slices"
	"time"
)

// Attention levels of a zone, as the daemon reports them. A stretch with
// no level on record counts as LevelUnknown, never as LevelNone.
const (
	LevelNone       = "none"
	LevelAlert      = "alert"
	LevelAction     = "action"
	LevelOutOfClass = "out-of-class"
	LevelUnknown    = "unknown"
)

// Run is a production run (a batch, a wafer lot) in a zone. A zero End is
// a run still going on.
type Run struct {
	ID, Zone     string
	Start, End   time.Time
	Product, Lot string
}

// until is the run's end, or now while it is open.
func (r Run) until(now time.Time) time.Time {
	if r.End.IsZero() {
		return now
	}
	return r.End
}

// Alarm is what exposure needs of an alarm. A zero Cleared is an alarm
// not yet cleared.
type Alarm struct {
	ID, Zone, Kind, Level string
	Location              string
	SizeUM                float64
	Since, Cleared        time.Time
	Peak                  float64
	PeakTime              time.Time
}

func (a Alarm) until(now time.Time) time.Time {
	if a.Cleared.IsZero() {
		return now
	}
	return a.Cleared
}

// LevelChange is a change of the zone's attention level: Level holds from
// Time until the next change.
type LevelChange struct {
	Time  time.Time
	Level string
}

// Peak is the highest concentration at one size over a span, and where
// and when it was seen.
type Peak struct {
	SizeUM   float64
	Location string
	Value    float64
	Time     time.Time
}

// Exposure is what a run was exposed to.
type Exposure struct {
	Run         Run
	Until       time.Time                // the run's end, or now for an open run
	Alarms      []Alarm                  // the zone's alarms that overlapped the run, edges included, oldest first
	TimeByLevel map[string]time.Duration // time of the run at each attention level
	Peaks       []Peak                   // per size, smallest size first
}

// spansTouch tells whether the closed spans [s1, e1] and [s2, e2] share a
// moment: an alarm that cleared at the very second a run began did
// overlap it.
func spansTouch(s1, e1, s2, e2 time.Time) bool {
	return !s1.After(e2) && !s2.After(e1)
}

// CheckRun reports the first problem of r, naming the field.
func CheckRun(r Run) error {
	switch {
	case r.ID == "":
		return inputError("run: ID: empty")
	case r.Zone == "":
		return inputError("run %s: Zone: empty", r.ID)
	case r.Start.IsZero():
		return inputError("run %s: Start: zero time", r.ID)
	case !r.End.IsZero() && !r.End.After(r.Start):
		return inputError("run %s: End: %s is not after Start %s", r.ID, r.End.UTC().Format(time.RFC3339), r.Start.UTC().Format(time.RFC3339))
	}
	return nil
}

// RunExposure collects, for run at time now, the alarms of its zone that
// overlapped it, its time at each attention level from the zone's level
// timeline, and the peak concentration per size of the zone's locations
// during it. alarms and levels may hold other zones' and other times'
// records; series must be the run's zone's.
func RunExposure(run Run, now time.Time, alarms []Alarm, levels []LevelChange, series []LocationSeries) (Exposure, error) {
	if err := CheckRun(run); err != nil {
		return Exposure{}, err
	}
	until := run.until(now)
	if until.Before(run.Start) {
		return Exposure{}, inputError("run %s: Start: %s is after now %s", run.ID, run.Start.UTC().Format(time.RFC3339), now.UTC().Format(time.RFC3339))
	}
	ex := Exposure{Run: run, Until: until, TimeByLevel: TimeByLevel(levels, run.Start, until)}
	for _, a := range alarms {
		if a.Zone == run.Zone && spansTouch(run.Start, until, a.Since, a.until(now)) {
			ex.Alarms = append(ex.Alarms, a)
		}
	}
	slices.SortStableFunc(ex.Alarms, func(a, b Alarm) int { return a.Since.Compare(b.Since) })
	ex.Peaks = Peaks(series, run.Start, until)
	return ex, nil
}

// AlarmRuns returns the runs of the alarm's zone that it overlapped, edges
// included, in order of start.
func AlarmRuns(a Alarm, now time.Time, runs []Run) []Run {
	var out []Run
	for _, r := range runs {
		if r.Zone == a.Zone && spansTouch(r.Start, r.until(now), a.Since, a.until(now)) {
			out = append(out, r)
		}
	}
	slices.SortStableFunc(out, func(a, b Run) int { return a.Start.Compare(b.Start) })
	return out
}

// TimeByLevel splits [from, to) by the attention level in force. levels
// need not be sorted; time before the first change on record is
// LevelUnknown, and so is a change with an empty level.
func TimeByLevel(levels []LevelChange, from, to time.Time) map[string]time.Duration {
	out := map[string]time.Duration{}
	if !to.After(from) {
		return out
	}
	ls := slices.Clone(levels)
	slices.SortStableFunc(ls, func(a, b LevelChange) int { return a.Time.Compare(b.Time) })
	cur, at := LevelUnknown, from
	for _, l := range ls {
		if l.Time.After(from) {
			if !l.Time.Before(to) {
				break
			}
			out[cur] += l.Time.Sub(at)
			at = l.Time
		}
		cur = l.Level
		if cur == "" {
			cur = LevelUnknown
		}
	}
	out[cur] += to.Sub(at)
	return out
}

// Peaks returns, per size, the highest concentration of any series in
// [from, to], the earliest if it was reached more than once.
func Peaks(series []LocationSeries, from, to time.Time) []Peak {
	bySize := map[float64]*Peak{}
	for _, s := range series {
		for _, p := range s.Points {
			if p.Time.Before(from) || p.Time.After(to) {
				continue
			}
			cur := bySize[s.SizeUM]
			if cur == nil || p.Value > cur.Value || (p.Value == cur.Value && p.Time.Before(cur.Time)) {
				bySize[s.SizeUM] = &Peak{SizeUM: s.SizeUM, Location: s.Location, Value: p.Value, Time: p.Time}
			}
		}
	}
	out := make([]Peak, 0, len(bySize))
	for _, p := range bySize {
		out = append(out, *p)
	}
	slices.SortFunc(out, func(a, b Peak) int { return cmp.Compare(a.SizeUM, b.SizeUM) })
	return out
}

// String words a run for a report line.
func (r Run) String() string {
	end := "open"
	if !r.End.IsZero() {
		end = r.End.UTC().Format(time.RFC3339)
	}
	return fmt.Sprintf("%s (%s, %s to %s, %s lot %s)", r.ID, r.Zone, r.Start.UTC().Format(time.RFC3339), end, r.Product, r.Lot)
}
