package api

import (
	"fmt"
	"net/http"
	"strconv"
	"time"

	"cleanmon/alerts"
	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
	"cleanmon/store"
)

// levelsJSON is the answer of GET /api/v1/zones/{zone}/levels.
type levelsJSON struct {
	Zone   string                    `json:"zone"`
	From   time.Time                 `json:"from"`
	To     time.Time                 `json:"to"`
	Days   int                       `json:"days"`
	Method string                    `json:"method"`
	Sizes  map[string]sizeLevelsJSON `json:"sizes"`
	Notes  []string                  `json:"notes"`
}

type sizeLevelsJSON struct {
	// Suggested are the zone's alert and action levels from the pooled
	// history of its locations (never above the limit).
	Suggested alerts.LevelAdvice `json:"suggested"`
	// Configured are the levels in force now.
	ConfiguredAlert  *float64 `json:"configured_alert_per_m3"`
	ConfiguredAction *float64 `json:"configured_action_per_m3"`
	// Locations are each location's count baseline: centre c̄ and upper
	// control limit c̄ + 3√c̄ of the raw counts per sample (Poisson).
	Locations map[string]alerts.ControlLimits `json:"locations"`
}

const levelsMethodNote = "alert = 95th and action = 99th percentile of the per-sample concentrations over the period, raised to the mean where below it and never above the class or grade limit (see alerts.SuggestLevels); ISO 14644-2 asks alert and action levels to be set from such history, by the site's qualified people"

// zoneLevels is GET /api/v1/zones/{zone}/levels?days=N (default 30, at
// most 366): suggested alert and action levels from the stored history,
// as advice for the people who set them, never applied by itself.
func (s *Server) zoneLevels(w http.ResponseWriter, r *http.Request) {
	zone := zoneOf(r).ID
	if _, ok := location(w, r, zoneOf(r)); !ok {
		return
	}
	days := 30
	if v := r.URL.Query().Get("days"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 1 || n > 366 {
			httpx.WriteFieldError(w, "days", fmt.Sprintf("%q: want a whole number of days, 1–366", v))
			return
		}
		days = n
	}
	view, _ := s.zones.Zone(zone)
	to := s.now().UTC()
	from := to.Add(-time.Duration(days) * 24 * time.Hour)
	conc := map[float64][]float64{}
	counts := map[float64]map[string][]float64{}
	for _, size := range view.Sizes {
		counts[size] = map[string][]float64{}
	}
	for _, c := range s.zoneCounters(zone, "") {
		err := s.store.ScanReadings(c.id, from, to, func(rd store.Reading) error {
			if rd.Status == collector.StatusFault {
				return nil // a faulty sample says nothing of the room
			}
			cum, per := rd.Cumulative(), rd.PerM3()
			for i, size := range rd.Sizes {
				if m, judged := counts[size]; judged {
					conc[size] = append(conc[size], per[i])
					m[c.location] = append(m[c.location], float64(cum[i]))
				}
			}
			return r.Context().Err()
		})
		if err != nil {
			Errors.Write(w, "reading the store: ", err)
			return
		}
	}
	out := levelsJSON{Zone: zone, From: from, To: to, Days: days, Method: string(alerts.LevelsByPercentile),
		Sizes: map[string]sizeLevelsJSON{}, Notes: []string{levelsMethodNote}}
	for _, l := range view.Limits {
		limit := 0.0
		if l.Limit != nil {
			limit = *l.Limit
		} else {
			out.Notes = append(out.Notes, classify.FormatSize(l.SizeUM)+" µm: no class or grade limit, levels are not capped")
		}
		sl := sizeLevelsJSON{Suggested: alerts.SuggestLevels(conc[l.SizeUM], limit), ConfiguredAlert: l.Alert, ConfiguredAction: l.Action,
			Locations: map[string]alerts.ControlLimits{}}
		for loc, cs := range counts[l.SizeUM] {
			sl.Locations[loc] = alerts.Baseline(cs)
		}
		out.Sizes[classify.FormatSize(l.SizeUM)] = sl
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}
