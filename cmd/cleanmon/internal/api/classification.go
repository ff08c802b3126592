package api

import (
	"context"
	"errors"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"time"

	"cleanmon/alerts"
	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
	"cleanmon/store"
)

// maxClassificationReadings bounds what one classification reads into
// memory (Certify needs every sample at once): about a year of one-minute
// readings of a zone with two counters.
const maxClassificationReadings = 1_000_000

var errTooManyReadings = errors.New("too many readings")

// zoneClassification is GET /api/v1/zones/{zone}/classification: the
// stored readings of the zone in [from, to) certified as planned samples
// (see certifyStored).
func (s *Server) zoneClassification(w http.ResponseWriter, r *http.Request) {
	if _, ok := location(w, r, zoneOf(r)); !ok {
		return
	}
	if r.URL.Query().Has("location") {
		httpx.WriteFieldError(w, "location", "a classification covers every location of the zone")
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	rep, p := s.certifyStored(r.Context(), zoneOf(r).ID, from, to)
	if p != nil {
		p.write(w)
		return
	}
	httpx.WriteJSON(w, http.StatusOK, rep)
}

// CertifyStored is the classification of the stored readings of zone in
// [from, to) (RFC 3339 times) as GET /api/v1/zones/{zone}/classification
// answers it: its status, its body (exactly the bytes the API sends), and
// the report when the status is 200. The certification report of the
// pages is rendered from it, so that the page, the API and the report
// cannot disagree.
func (s *Server) CertifyStored(ctx context.Context, zone, from, to string) (int, []byte, *classify.Report) {
	answer := func(status int, v any) (int, []byte, *classify.Report) {
		b, err := httpx.Marshal(v)
		if err != nil {
			return http.StatusInternalServerError, []byte("{\"error\":\"answer could not be encoded\"}\n"), nil
		}
		return status, b, nil
	}
	if _, ok := s.cfg.Zone(zone); !ok {
		return answer(http.StatusNotFound, httpx.ErrorBody{Error: fmt.Sprintf("unknown zone %q", zone)})
	}
	tf, tt, field, msg := httpx.ParseRange(url.Values{"from": {from}, "to": {to}}, s.now())
	if field != "" {
		return answer(http.StatusBadRequest, httpx.ErrorBody{Error: field + ": " + msg, Field: field})
	}
	rep, p := s.certifyStored(ctx, zone, tf, tt)
	if p != nil {
		return answer(p.status, httpx.ErrorBody{Error: p.msg, Field: p.field})
	}
	st, b, _ := answer(http.StatusOK, rep)
	return st, b, &rep
}

// problem is a refusal of a computation, with the status and the field at
// fault, for the routes that answer it.
type problem struct {
	status int
	field  string
	msg    string
}

func (p *problem) write(w http.ResponseWriter) {
	if p.field != "" {
		httpx.WriteJSON(w, p.status, httpx.ErrorBody{Error: p.msg, Field: p.field})
		return
	}
	httpx.WriteError(w, p.status, p.msg)
}

// certifyStored certifies the stored readings of zone in [from, to).
//
// A fixed counter's reading is often smaller than the single sample volume
// the plan needs (a 2.83 L/min counter gives 2.83 L a minute where ISO 6 at
// 5 µm needs about 68 L), so consecutive readings of a location are pooled,
// counts and volumes summed, until each pooled sample reaches that volume.
// A short remainder at the end of the range is left out when the location
// has a full sample, and kept (so that the shortfall shows) when it has
// none. Readings with a fault status are left out.
func (s *Server) certifyStored(ctx context.Context, zone string, from, to time.Time) (classify.Report, *problem) {
	v, _ := s.zones.Zone(zone)
	if v.Class == nil && v.Grade == "" {
		return classify.Report{}, &problem{status: http.StatusBadRequest, msg: fmt.Sprintf("zone %q is unclassified: it has no class or grade to be certified against", zone)}
	}
	target := s.storedTarget(zone, v)
	plan, err := classify.MakePlan(target)
	if err != nil {
		return classify.Report{}, &problem{status: http.StatusBadRequest, msg: fmt.Sprintf("zone %q cannot be certified: %v", zone, err)}
	}
	pooled, p := s.poolSamples(ctx, zone, v.Sizes, plan.SampleVolumeL, from, to)
	if p != nil {
		return classify.Report{}, p
	}
	if len(pooled.samples) == 0 {
		return classify.Report{}, &problem{status: http.StatusUnprocessableEntity, msg: fmt.Sprintf("zone %q has no usable readings in [%s, %s)", zone, from.Format("2006-01-02T15:04:05Z"), to.Format("2006-01-02T15:04:05Z"))}
	}
	rep, err := classify.CertifyWith(target, pooled.samples, classify.Options{Instruments: s.cfg.Instruments(zone)})
	if err != nil {
		return classify.Report{}, &problem{status: http.StatusUnprocessableEntity, msg: "stored readings cannot be certified: " + err.Error()}
	}
	rep.Warnings = append(rep.Warnings, pooled.warnings...)
	return rep, nil
}

// storedTarget is what a zone is certified against: its class or grade,
// state, sizes and area, and the flow of its counters.
func (s *Server) storedTarget(zone string, v alerts.ZoneView) classify.Target {
	target := classify.Target{Grade: v.Grade, State: v.LimitsState, Sizes: v.Sizes, AreaM2: v.AreaM2, Edition: classify.Edition(v.Edition)}
	if v.Class != nil {
		target.Class = *v.Class
	}
	for _, k := range s.cfg.Counters {
		if k.Zone == zone && k.FlowLPM > 0 {
			target.FlowLPM = k.FlowLPM
			break
		}
	}
	if target.FlowLPM == 0 {
		target.FlowLPM = collector.DefaultFlowLPM
	}
	return target
}

// pooledSamples are the stored readings pooled into planned samples, with
// what was left out.
type pooledSamples struct {
	samples  []classify.Sample
	warnings []string
}

// poolSamples reads the zone's readings and pools each location's into
// samples of at least sampleL litres.
func (s *Server) poolSamples(ctx context.Context, zone string, sizes []float64, sampleL float64, from, to time.Time) (pooledSamples, *problem) {
	var out pooledSamples
	read, faults, missing := 0, 0, 0
	for _, c := range s.zoneCounters(zone, "") {
		var pool *classify.Sample
		full := 0
		err := s.store.ScanReadings(c.id, from, to, func(rd store.Reading) error {
			if read++; read > maxClassificationReadings {
				return errTooManyReadings
			}
			if err := ctx.Err(); err != nil {
				return err
			}
			if rd.Status == collector.StatusFault {
				faults++
				return nil
			}
			counts, ok := countsAt(rd, sizes)
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
			if pool.VolumeL >= sampleL*(1-1e-9) {
				out.samples = append(out.samples, *pool)
				pool, full = nil, full+1
			}
			return nil
		})
		switch {
		case errors.Is(err, errTooManyReadings):
			return out, &problem{status: http.StatusBadRequest, field: "from", msg: fmt.Sprintf("from: the range holds more than %d readings; narrow it", maxClassificationReadings)}
		case err != nil:
			return out, &problem{status: Errors.Status(err), msg: "reading the store: " + err.Error()}
		}
		if pool != nil {
			if full == 0 {
				out.samples = append(out.samples, *pool)
			} else {
				out.warnings = append(out.warnings, fmt.Sprintf("location %s: the last %s L (below the single sample volume) left out", c.location, fmtLitres(pool.VolumeL)))
			}
		}
	}
	if faults > 0 {
		out.warnings = append(out.warnings, fmt.Sprintf("%d readings with a fault status left out", faults))
	}
	if missing > 0 {
		out.warnings = append(out.warnings, fmt.Sprintf("%d readings without every zone size left out", missing))
	}
	return out, nil
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
