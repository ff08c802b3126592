package api

import (
	"errors"
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

// zoneRecovery is GET /api/v1/zones/{zone}/recovery?from=&to=[&location=]
// [&size=][&target_class=]: the recovery test on the stored readings of
// one location in [from, to), the same classify.FitRecoveryTest as
// `cleanmon recovery`. The size defaults to 0.5 µm when the zone
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
	size, target, p := recoveryParams(r, v.ZoneView)
	if p != nil {
		p.write(w)
		return
	}
	times, conc, p := s.recoverySeries(counters[0].id, size, from, to)
	if p != nil {
		p.write(w)
		return
	}
	a, err := classify.FitRecoveryTest(times, conc, size, target)
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
