package api

import (
	"errors"
	"fmt"
	"math"
	"net/http"
	"strconv"
	"time"

	"cleanmon/alerts"
	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
	"cleanmon/store"
)

// RecoveryPoint is one concentration of a recovery series.
type RecoveryPoint struct {
	Time   time.Time `json:"time"`
	Minute float64   `json:"minute"` // since the first point of the series
	PerM3  float64   `json:"per_m3"`
	Used   bool      `json:"used"` // part of the fitted decay
}

// RecoveryAnswer is an ISO 14644-3 recovery test: the JSON of
// GET /api/v1/zones/{zone}/recovery and of `cleanmon recovery --format
// json`, which are made by the same FitRecovery.
type RecoveryAnswer struct {
	SizeUM      string    `json:"size_um"`
	TargetClass *float64  `json:"target_class,omitempty"`
	FloorPerM3  float64   `json:"floor_per_m3"`
	Start       time.Time `json:"start"`
	classify.Recovery
	Series []RecoveryPoint `json:"series"`
}

// ErrRecovery reports a series from which no recovery rate can be fitted.
var ErrRecovery = errors.New("no recovery rate")

// FitRecovery fits the log-linear decay of a series of concentrations at
// one size, in time order. With a target class the fit stops before the
// first point at or below the class limit at that size (ISO 14644-1:2015),
// where the decay flattens into the room's background.
func FitRecovery(times []time.Time, perM3 []float64, sizeUM float64, targetClass *float64) (RecoveryAnswer, error) {
	a := RecoveryAnswer{SizeUM: classify.FormatSize(sizeUM), TargetClass: targetClass, Series: []RecoveryPoint{}}
	if len(times) == 0 || len(times) != len(perM3) {
		return a, fmt.Errorf("%w: %d times and %d concentrations", ErrRecovery, len(times), len(perM3))
	}
	if targetClass != nil {
		l, err := classify.ISOLimit(*targetClass, sizeUM, classify.Edition2015)
		if err != nil {
			return a, fmt.Errorf("%w: target class: %v", ErrRecovery, err)
		}
		if !l.Specified {
			return a, fmt.Errorf("%w: ISO %s has no limit at %s µm: %s", ErrRecovery, classify.FormatClass(*targetClass), a.SizeUM, l.Note)
		}
		a.FloorPerM3 = l.PerM3
	}
	a.Start = times[0].UTC()
	mins := make([]float64, len(times))
	for i, t := range times {
		mins[i] = t.Sub(times[0]).Minutes()
		a.Series = append(a.Series, RecoveryPoint{Time: t.UTC(), Minute: math.Round(mins[i]*1000) / 1000, PerM3: perM3[i]})
	}
	r, err := classify.RecoveryFit(mins, perM3, a.FloorPerM3)
	if err != nil {
		return a, fmt.Errorf("%w: %v", ErrRecovery, err)
	}
	a.Recovery = r
	for i := range a.Series {
		a.Series[i].Used = mins[i] >= r.FromMin && mins[i] <= r.ToMin
	}
	return a, nil
}

// zoneRecovery is GET /api/v1/zones/{zone}/recovery?from=&to=[&location=]
// [&size=][&target_class=]: the recovery test on the stored readings of
// one location in [from, to). The size defaults to 0.5 µm when the zone
// is judged there, else its smallest size; the target class to the
// zone's class.
func (s *Server) zoneRecovery(w http.ResponseWriter, r *http.Request) {
	z := zoneOf(r)
	loc, ok := location(w, r, z)
	if !ok {
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	counters := s.zoneCounters(z.ID, loc)
	if len(counters) != 1 {
		httpx.WriteFieldError(w, "location", fmt.Sprintf("zone %q has %d counters here: a recovery test is of one location; give location=", z.ID, len(counters)))
		return
	}
	v, _ := s.zones.Zone(z.ID)
	size, target, p := recoveryParams(r, v)
	if p != nil {
		p.write(w)
		return
	}
	times, conc, p := s.recoverySeries(counters[0].id, size, from, to)
	if p != nil {
		p.write(w)
		return
	}
	a, err := FitRecovery(times, conc, size, target)
	if err != nil {
		httpx.WriteError(w, http.StatusUnprocessableEntity, fmt.Sprintf("location %s, %s µm: %v", counters[0].location, classify.FormatSize(size), err))
		return
	}
	httpx.WriteJSON(w, http.StatusOK, a)
}

// recoveryParams reads size and target_class, with the zone's defaults.
func recoveryParams(r *http.Request, v alerts.ZoneView) (float64, *float64, *problem) {
	q := r.URL.Query()
	size := 0.0
	for _, sz := range v.Sizes {
		if sz == 0.5 {
			size = 0.5
		}
	}
	if size == 0 && len(v.Sizes) > 0 {
		size = v.Sizes[0]
	}
	if q.Has("size") {
		sz, err := classify.ParseSize(q.Get("size"))
		if err != nil {
			return 0, nil, &problem{status: http.StatusBadRequest, field: "size", msg: "size: " + err.Error()}
		}
		size = sz
	}
	if size == 0 {
		return 0, nil, &problem{status: http.StatusBadRequest, field: "size", msg: "size: the zone has no sizes; give size="}
	}
	target := v.Class
	if q.Has("target_class") {
		n, err := strconv.ParseFloat(q.Get("target_class"), 64)
		if err == nil {
			err = classify.ValidateClass(n)
		}
		if err != nil {
			return 0, nil, &problem{status: http.StatusBadRequest, field: "target_class", msg: fmt.Sprintf("target_class: %q is not an ISO class 1–9", q.Get("target_class"))}
		}
		target = &n
	}
	return size, target, nil
}

// recoverySeries reads one counter's concentrations at a size, leaving
// out readings with a fault status or without that size.
func (s *Server) recoverySeries(counter string, size float64, from, to time.Time) ([]time.Time, []float64, *problem) {
	var times []time.Time
	var conc []float64
	err := s.store.ScanReadings(counter, from, to, func(rd store.Reading) error {
		if len(times) >= maxClassificationReadings {
			return errTooManyReadings
		}
		if rd.Status == collector.StatusFault {
			return nil
		}
		c, ok := countsAt(rd, []float64{size})
		if !ok || !(rd.VolumeL > 0) {
			return nil
		}
		times = append(times, rd.Time)
		conc = append(conc, classify.PerCubicMetre(c[0], rd.VolumeL))
		return nil
	})
	switch {
	case errors.Is(err, errTooManyReadings):
		return nil, nil, &problem{status: http.StatusBadRequest, field: "from", msg: fmt.Sprintf("from: the range holds more than %d readings; narrow it", maxClassificationReadings)}
	case err != nil:
		return nil, nil, &problem{status: Errors.Status(err), msg: "reading the store: " + err.Error()}
	case len(times) == 0:
		return nil, nil, &problem{status: http.StatusUnprocessableEntity, msg: fmt.Sprintf("no usable readings of %s at %s µm in the range", counter, classify.FormatSize(size))}
	}
	return times, conc, nil
}
