package main

import (
	"errors"
	"fmt"
	"math"
	"net/http"

	"cleanmon/classify"
	"cleanmon/collector"
	"cleanmon/store"
)

// maxClassificationReadings bounds what one classification reads into
// memory (Certify needs every sample at once): about a year of one-minute
// readings of a zone with two counters.
const maxClassificationReadings = 1_000_000

var errTooManyReadings = errors.New("too many readings")

// zoneClassification is GET /api/v1/zones/{zone}/classification: the
// stored readings of the zone in [from, to) certified as planned samples.
//
// A fixed counter's reading is often smaller than the single sample volume
// the plan needs (a 2.83 L/min counter gives 2.83 L a minute where ISO 6 at
// 5 µm needs about 68 L), so consecutive readings of a location are pooled,
// counts and volumes summed, until each pooled sample reaches that volume.
// A short remainder at the end of the range is left out when the location
// has a full sample, and kept (so that the shortfall shows) when it has
// none. Readings with a fault status are left out.
func (s *server) zoneClassification(w http.ResponseWriter, r *http.Request) {
	zone, _, ok := s.zoneAndLocation(w, r)
	if !ok {
		return
	}
	if r.URL.Query().Has("location") {
		writeFieldError(w, "location", "a classification covers every location of the zone")
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	v, _ := s.zones.Zone(zone)
	if v.Class == nil && v.Grade == "" {
		writeError(w, http.StatusBadRequest, fmt.Sprintf("zone %q is unclassified: it has no class or grade to be certified against", zone))
		return
	}
	target := classify.Target{Grade: v.Grade, State: v.LimitsState, Sizes: v.Sizes, AreaM2: v.AreaM2, Edition: classify.Edition(v.Edition)}
	if v.Class != nil {
		target.Class = *v.Class
	}
	counters := s.zoneCounters(zone, "")
	for _, k := range s.cfg.Counters {
		if k.Zone == zone && k.FlowLPM > 0 {
			target.FlowLPM = k.FlowLPM
			break
		}
	}
	if target.FlowLPM == 0 {
		target.FlowLPM = collector.DefaultFlowLPM
	}
	plan, err := classify.MakePlan(target)
	if err != nil {
		writeError(w, http.StatusBadRequest, fmt.Sprintf("zone %q cannot be certified: %v", zone, err))
		return
	}

	var samples []classify.Sample
	var warnings []string
	read, faults, missing := 0, 0, 0
	for _, c := range counters {
		var pool *classify.Sample
		full := 0
		err := s.store.ScanReadings(c.id, from, to, func(rd store.Reading) error {
			if read++; read > maxClassificationReadings {
				return errTooManyReadings
			}
			if err := r.Context().Err(); err != nil {
				return err
			}
			if rd.Status == collector.StatusFault {
				faults++
				return nil
			}
			counts, ok := countsAt(rd, v.Sizes)
			if !ok {
				missing++
				return nil
			}
			if pool == nil {
				pool = &classify.Sample{Location: c.location, Counter: c.id, Time: rd.Time, Counts: make([]uint64, len(counts)),
					Ref: fmt.Sprintf("readings of %s from %s", c.id, rd.Time.UTC().Format("2006-01-02T15:04:05Z"))}
			}
			pool.VolumeL += rd.VolumeL
			for i, n := range counts {
				pool.Counts[i] += n
			}
			if pool.VolumeL >= plan.SampleVolumeL*(1-1e-9) {
				samples = append(samples, *pool)
				pool, full = nil, full+1
			}
			return nil
		})
		switch {
		case errors.Is(err, errTooManyReadings):
			writeFieldError(w, "from", fmt.Sprintf("the range holds more than %d readings; narrow it", maxClassificationReadings))
			return
		case err != nil:
			writeError(w, errorStatus(err), "reading the store: "+err.Error())
			return
		}
		if pool != nil {
			if full == 0 {
				samples = append(samples, *pool)
			} else {
				warnings = append(warnings, fmt.Sprintf("location %s: the last %s L (below the single sample volume) left out", c.location, fmtLitres(pool.VolumeL)))
			}
		}
	}
	if faults > 0 {
		warnings = append(warnings, fmt.Sprintf("%d readings with a fault status left out", faults))
	}
	if missing > 0 {
		warnings = append(warnings, fmt.Sprintf("%d readings without every zone size left out", missing))
	}
	if len(samples) == 0 {
		writeError(w, http.StatusUnprocessableEntity, fmt.Sprintf("zone %q has no usable readings in [%s, %s)", zone, from.Format("2006-01-02T15:04:05Z"), to.Format("2006-01-02T15:04:05Z")))
		return
	}
	rep, err := classify.Certify(target, samples)
	if err != nil {
		writeError(w, http.StatusUnprocessableEntity, "stored readings cannot be certified: "+err.Error())
		return
	}
	rep.Warnings = append(rep.Warnings, warnings...)
	writeJSON(w, http.StatusOK, rep)
}

// countsAt picks a reading's cumulative counts at the given sizes.
func countsAt(rd store.Reading, sizes []float64) ([]uint64, bool) {
	cum := rd.Cumulative()
	out := make([]uint64, len(sizes))
	for i, want := range sizes {
		found := false
		for j, have := range rd.Sizes {
			if math.Abs(have-want) < 1e-9 && j < len(cum) {
				out[i], found = cum[j], true
			}
		}
		if !found {
			return nil, false
		}
	}
	return out, true
}

func fmtLitres(v float64) string { return fmt.Sprintf("%.2f", v) }
