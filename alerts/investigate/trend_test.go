package investigate

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"
)

// The nearest-rank percentile is gonum's empirical quantile (stat.Empirical:
// the smallest value whose empirical CDF reaches p).
func TestPercentileAgainstGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 9))
	ps := []float64{0, 0.01, 0.05, 0.5, 0.95, 0.99, 1}
	for trial := range 200 {
		n := 1 + rng.IntN(400)
		v := make([]float64, n)
		for i := range v {
			v[i] = math.Round(rng.ExpFloat64() * 1000) // ties happen, as with counts
		}
		slices.Sort(v)
		for _, p := range append(ps, rng.Float64()) {
			got, want := Percentile(v, p), stat.Quantile(p, stat.Empirical, v, nil)
			if got != want {
				t.Fatalf("trial %d, n %d, p %v: %v, gonum %v", trial, n, p, got, want)
			}
		}
	}
	if !math.IsNaN(Percentile(nil, 0.5)) || !math.IsNaN(Percentile([]float64{1}, 1.5)) {
		t.Error("no values or p outside [0, 1] must give NaN")
	}
}

func TestSummariseEmptyIsNaN(t *testing.T) {
	st := Summarise(nil, Levels{Alert: 1})
	if st.N != 0 || !math.IsNaN(st.Mean) || !math.IsNaN(st.P95) || !math.IsNaN(st.Max) {
		t.Errorf("empty summary %+v: want NaN figures, never zero", st)
	}
}

// The month's figures against a computation over the raw readings here.
func TestMonthAgainstRawReadings(t *testing.T) {
	site := time.FixedZone("site", 3600) // the demo site's winter time, UTC+1
	from := time.Date(2026, 3, 1, 0, 0, 0, 0, site)
	prev := time.Date(2026, 2, 1, 0, 0, 0, 0, site)
	to := time.Date(2026, 4, 1, 0, 0, 0, 0, site)
	rng := rand.New(rand.NewPCG(3, 2026))
	lv := Levels{Alert: 20000, Action: 35000, Class: 352000}
	var pts []Point
	for tm := prev.Add(-time.Hour); tm.Before(to.Add(time.Hour)); tm = tm.Add(7 * time.Minute) {
		pts = append(pts, Point{tm, 5000 * math.Exp(rng.NormFloat64())})
	}
	pts = append(pts, Point{from, 40000}, Point{to, 1e9}) // on the edges: the first in, the second out
	in := MonthInput{Zone: "assembly", Month: time.Date(2026, 3, 15, 12, 0, 0, 0, time.UTC), Loc: site,
		Series: []TrendSeries{{Location: "asm-1", SizeUM: 0.5, Levels: lv, Points: pts}},
		Alarms: []Alarm{
			{Zone: "assembly", Kind: "excursion", Level: "alert", Since: from},
			{Zone: "assembly", Kind: "excursion", Level: "alert", Since: from.Add(48 * time.Hour)},
			{Zone: "assembly", Kind: "excursion", Level: "action", Since: from.Add(-time.Second)},
			{Zone: "assembly", Kind: "pressure-low", Level: "alert", Since: to},
			{Zone: "gowning", Kind: "excursion", Level: "alert", Since: from.Add(time.Hour)},
		},
		Doors: []DoorOpening{
			{Sensor: "dp-asm", Start: from}, {Sensor: "dp-asm", Start: from.Add(23*time.Hour + 59*time.Minute)},
			{Sensor: "dp-asm", Start: from.Add(24 * time.Hour)}, {Sensor: "dp-asm", Start: from.Add(-time.Minute)},
		},
		Levels: []LevelChange{{from.Add(-10 * 24 * time.Hour), LevelNone}, {from.Add(10 * 24 * time.Hour), LevelAlert}},
	}
	tr := Month(in, to.Add(24*time.Hour))
	if !tr.From.Equal(from) || !tr.To.Equal(to) || !tr.PreviousFrom.Equal(prev) {
		t.Fatalf("month %v–%v (previous from %v), want %v–%v from %v", tr.From, tr.To, tr.PreviousFrom, from, to, prev)
	}
	// Reference: a plain pass over the raw readings.
	var vals []float64
	sum, alert, action, class := 0.0, 0, 0, 0
	for _, p := range pts {
		if p.Time.Before(from) || !p.Time.Before(to) {
			continue
		}
		vals = append(vals, p.Value)
		sum += p.Value
		if p.Value > lv.Alert {
			alert++
		}
		if p.Value > lv.Action {
			action++
		}
		if p.Value > lv.Class {
			class++
		}
	}
	slices.Sort(vals)
	got := tr.Locations[0].This
	if got.N != len(vals) || math.Abs(got.Mean-sum/float64(len(vals))) > 1e-9*got.Mean {
		t.Errorf("n %d mean %v, want %d %v", got.N, got.Mean, len(vals), sum/float64(len(vals)))
	}
	if want := stat.Quantile(0.95, stat.Empirical, vals, nil); got.P95 != want {
		t.Errorf("p95 %v, gonum %v", got.P95, want)
	}
	if want := stat.Quantile(0.99, stat.Empirical, vals, nil); got.P99 != want {
		t.Errorf("p99 %v, gonum %v", got.P99, want)
	}
	if got.OverAlert != alert || got.OverAction != action || got.OverClass != class || got.Max != vals[len(vals)-1] {
		t.Errorf("over %d/%d/%d max %v, want %d/%d/%d %v", got.OverAlert, got.OverAction, got.OverClass, got.Max, alert, action, class, vals[len(vals)-1])
	}
	if tr.Locations[0].Previous.N == 0 {
		t.Error("the previous month has no samples")
	}
	wantAlarms := []KindLevelCount{{"excursion", "action", 0, 1}, {"excursion", "alert", 2, 0}}
	if !slices.Equal(tr.Alarms, wantAlarms) || tr.AlarmsThis != 2 || tr.AlarmsPrevious != 1 {
		t.Errorf("alarms %v (%d, %d), want %v (2, 1)", tr.Alarms, tr.AlarmsThis, tr.AlarmsPrevious, wantAlarms)
	}
	if len(tr.DoorsPerDay) != 31 || tr.DoorsPerDay[0].Count != 2 || tr.DoorsPerDay[1].Count != 1 || tr.DoorsThis != 3 || tr.DoorsPrevious != 1 {
		t.Errorf("doors per day %v (%d, %d), want 31 days starting 2, 1 (3, 1)", tr.DoorsPerDay[:3], tr.DoorsThis, tr.DoorsPrevious)
	}
	if tr.TimeByLevel[LevelNone] != 10*24*time.Hour || tr.TimeByLevel[LevelAlert] != 21*24*time.Hour {
		t.Errorf("time by level %v", tr.TimeByLevel)
	}
	if u := tr.PreviousTimeByLevel[LevelUnknown]; u != (28-10)*24*time.Hour {
		t.Errorf("previous month unknown %v, want the 18 days before the first level on record", u)
	}
	// A month still under way counts no time after now.
	part := Month(in, from.Add(36*time.Hour))
	if tot := part.TimeByLevel[LevelNone] + part.TimeByLevel[LevelAlert] + part.TimeByLevel[LevelUnknown]; tot != 36*time.Hour {
		t.Errorf("month under way: %v of time by level, want 36 h", tot)
	}
}
