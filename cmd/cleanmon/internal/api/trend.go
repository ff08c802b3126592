package api

import (
	"context"
	"fmt"
	"math"
	"net/http"
	"slices"
	"strings"
	"time"

	"cleanmon/alerts"
	"cleanmon/alerts/investigate"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/store"
)

// A zone's month on one page, as JSON. The shape is report.Trend's: the
// report package renders this answer (text, HTML, PDF; the `cleanmon
// report trend` command reads it over HTTP), so the types are declared
// once, there, and named here for this file's use.
type (
	trendJSON     = report.Trend
	trendLocJSON  = report.TrendLocation
	statsJSON     = report.TrendStats // figures are nil where there were no samples (never 0)
	kindLevelJSON = report.KindLevel
	dayJSON       = report.DayCount
	adviceJSON    = report.Advice
	chartJSON     = report.TrendChart // one size: the hourly mean of each location over the month
	chartLineJSON = report.TrendLine
)

func fptr(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

func levelPtr(v float64) *float64 {
	if v <= 0 {
		return nil
	}
	return &v
}

func statsObject(s investigate.Stats) statsJSON {
	return statsJSON{N: s.N, Mean: fptr(s.Mean), P95: fptr(s.P95), P99: fptr(s.P99), Max: fptr(s.Max),
		OverAlert: s.OverAlert, OverAction: s.OverAction, OverClass: s.OverClass}
}

// zoneTrend is GET /api/v1/zones/{zone}/trend?month=2026-03 (default the
// month before this one): the month on one page beside the month before.
func (s *Server) zoneTrend(w http.ResponseWriter, r *http.Request) {
	status, body := s.TrendJSON(r.Context(), zoneOf(r).ID, r.URL.Query().Get("month"))
	httpx.WriteRaw(w, status, body)
}

// ErrMonth is a month that is not YYYY-MM.
var ErrMonth = fmt.Errorf("%w: month", investigate.ErrInput)

// ParseMonth reads "2026-03" (UTC, the daemon's calendar); empty is the
// month before the one of now.
func ParseMonth(v string, now time.Time) (time.Time, error) {
	if v == "" {
		n := now.UTC()
		return time.Date(n.Year(), n.Month(), 1, 0, 0, 0, 0, time.UTC).AddDate(0, -1, 0), nil
	}
	t, err := time.Parse("2006-01", v)
	if err != nil {
		return time.Time{}, fmt.Errorf("%w: %q is not a month such as 2026-03", ErrMonth, v)
	}
	return t, nil
}

// TrendJSON is the answer of GET /api/v1/zones/{zone}/trend, status and
// body, for the pages and the monthly file too.
func (s *Server) TrendJSON(ctx context.Context, zone, month string) (int, []byte) {
	out, err := s.trend(ctx, zone, month)
	if err != nil {
		b, _ := httpx.Marshal(httpx.ErrorBody{Error: err.Error(), Field: "month"})
		return Errors.Status(err), b
	}
	b, err := httpx.Marshal(out)
	if err != nil {
		b, _ = httpx.Marshal(httpx.ErrorBody{Error: err.Error()})
		return http.StatusInternalServerError, b
	}
	return http.StatusOK, b
}

func (s *Server) trend(ctx context.Context, zone, month string) (trendJSON, error) {
	z, ok := s.cfg.Zone(zone)
	if !ok {
		return trendJSON{}, fmt.Errorf("%w: unknown zone %q", store.ErrNotFound, zone)
	}
	now := s.now()
	m, err := ParseMonth(month, now)
	if err != nil {
		return trendJSON{}, err
	}
	from := time.Date(m.Year(), m.Month(), 1, 0, 0, 0, 0, time.UTC)
	to, prev := from.AddDate(0, 1, 0), from.AddDate(0, -1, 0)
	sizes := zoneSizes(z)
	rec, err := s.readZone(ctx, zone, sizes, prev, to.Add(-time.Nanosecond), true)
	if err != nil {
		return trendJSON{}, err
	}
	view, _ := s.zones.Zone(zone)
	levels := map[float64]investigate.Levels{}
	for _, l := range view.Limits {
		lv := investigate.Levels{}
		if l.Alert != nil {
			lv.Alert = *l.Alert
		}
		if l.Action != nil {
			lv.Action = *l.Action
		}
		if l.Limit != nil {
			lv.Class = *l.Limit
		}
		levels[l.SizeUM] = lv
	}
	in := investigate.MonthInput{Zone: zone, Month: from}
	for _, l := range rec.Locations {
		in.Series = append(in.Series, investigate.TrendSeries{Location: l.Location, SizeUM: l.SizeUM, Levels: levels[l.SizeUM], Points: l.Points})
	}
	alarms, err := s.alarmsOfZone(zone, prev)
	if err != nil {
		return trendJSON{}, err
	}
	for _, a := range alarms {
		in.Alarms = append(in.Alarms, exposureAlarm(a))
	}
	ps, err := s.readPressure(ctx, zone, prev, to.Add(-time.Nanosecond))
	if err != nil {
		return trendJSON{}, err
	}
	for _, p := range ps {
		in.Doors = append(in.Doors, investigate.DoorOpenings(p.Sensor, p.MinPa, investigate.DefaultDoorHysteresisPa, p.Points, prev, to)...)
	}
	in.Levels = levelTimeline(alarms, rec.First)
	tr := investigate.Month(in, now)
	out := trendObject(tr, s.cfg.Site, z, now)
	out.Advice = monthAdvice(rec.Locations, levels, sizes, from, to)
	out.Charts = monthCharts(rec.Locations, levels, sizes, from, to)
	out.Notes = append(out.Notes,
		"levels are those in force now ("+view.LimitsState+"); readings flagged faulty by their counter are left out",
		"percentiles are nearest-rank: each is a measured sample",
		"time by attention level is reconstructed from the alarm journal: the worst open alarm of the zone, none between alarms, unknown before the first reading; the rest of a month not yet over is left out",
		"door openings: stretches of a boundary DP below its minimum, closed when it is back "+fmt.Sprint(investigate.DefaultDoorHysteresisPa)+" Pa above it",
		levelsMethodNote)
	return out, nil
}

func trendObject(tr investigate.MonthTrend, siteName string, z *alerts.ZoneConfig, now time.Time) trendJSON {
	out := trendJSON{Site: siteName, Zone: tr.Zone, ZoneName: z.Name, Target: targetOf(z), Month: tr.From.Format("2006-01"),
		PreviousMonth: tr.PreviousFrom.Format("2006-01"), From: tr.From, To: tr.To, PreviousFrom: tr.PreviousFrom, Generated: now.UTC(),
		Locations: []trendLocJSON{}, Alarms: []kindLevelJSON{}, AlarmsThis: tr.AlarmsThis, AlarmsPrevious: tr.AlarmsPrevious,
		DoorsPerDay: []dayJSON{}, DoorsThis: tr.DoorsThis, DoorsPrevious: tr.DoorsPrevious,
		TimeByLevel: seconds(tr.TimeByLevel), PreviousTimeByLevel: seconds(tr.PreviousTimeByLevel), Notes: []string{}, Caution: Caution}
	for _, l := range tr.Locations {
		out.Locations = append(out.Locations, trendLocJSON{Location: l.Location, SizeUM: l.SizeUM, Alert: levelPtr(l.Levels.Alert),
			Action: levelPtr(l.Levels.Action), Class: levelPtr(l.Levels.Class), This: statsObject(l.This), Previous: statsObject(l.Previous)})
	}
	for _, a := range tr.Alarms {
		out.Alarms = append(out.Alarms, kindLevelJSON{Kind: a.Kind, Level: a.Level, This: a.This, Previous: a.Previous})
	}
	for _, d := range tr.DoorsPerDay {
		out.DoorsPerDay = append(out.DoorsPerDay, dayJSON{Day: d.Day.Format("2006-01-02"), Count: d.Count})
	}
	return out
}

// monthAdvice is the daemon's level advice (alerts.SuggestLevels, as GET
// .../levels gives it) over the month's samples of every location.
func monthAdvice(locs []investigate.LocationSeries, levels map[float64]investigate.Levels, sizes []float64, from, to time.Time) []adviceJSON {
	out := []adviceJSON{}
	for _, size := range sizes {
		var hist []float64
		for _, l := range locs {
			if l.SizeUM != size {
				continue
			}
			for _, p := range l.Points {
				if !p.Time.Before(from) && p.Time.Before(to) {
					hist = append(hist, p.Value)
				}
			}
		}
		adv := alerts.SuggestLevels(hist, levels[size].Class)
		out = append(out, adviceJSON{SizeUM: size, Samples: adv.Samples, Mean: adv.MeanPerM3, Alert: adv.Alert, Action: adv.Action,
			Limit: adv.Limit, Caveats: append([]string{}, adv.Caveats...)})
	}
	return out
}

// monthCharts are the hourly means of each location over the month, per
// size: 744 points a line at most.
func monthCharts(locs []investigate.LocationSeries, levels map[float64]investigate.Levels, sizes []float64, from, to time.Time) []chartJSON {
	out := []chartJSON{}
	for _, size := range sizes {
		lv := levels[size]
		c := chartJSON{SizeUM: size, Alert: levelPtr(lv.Alert), Action: levelPtr(lv.Action), Class: levelPtr(lv.Class), Series: []chartLineJSON{}}
		for _, l := range locs {
			if l.SizeUM != size {
				continue
			}
			line := chartLineJSON{Location: l.Location, Points: [][2]float64{}}
			var hour time.Time
			sum, n := 0.0, 0
			flush := func() {
				if n > 0 {
					line.Points = append(line.Points, [2]float64{float64(hour.UnixMilli()), sum / float64(n)})
				}
			}
			for _, p := range l.Points {
				if p.Time.Before(from) || !p.Time.Before(to) {
					continue
				}
				if h := p.Time.Truncate(time.Hour); !h.Equal(hour) {
					flush()
					hour, sum, n = h, 0, 0
				}
				sum += p.Value
				n++
			}
			flush()
			c.Series = append(c.Series, line)
		}
		slices.SortFunc(c.Series, func(a, b chartLineJSON) int { return strings.Compare(a.Location, b.Location) })
		out = append(out, c)
	}
	return out
}
