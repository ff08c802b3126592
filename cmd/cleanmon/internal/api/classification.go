package api

import (
	"context"
	"errors"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"sort"
	"strings"
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

var (
	errTooManyReadings = errors.New("too many readings")
	// errPlan: no sampling plan for the state some readings were taken in.
	errPlan = errors.New("no sampling plan")
)

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
// Each reading is judged against the limits of the operating state in
// force when it was taken (the clean-up period after a switch to at-rest
// still counts as the state before); readings taken in maintenance and
// readings the judge does not trust (a fault status, at or beyond the
// counter's maximum, a flow off its nominal) are kept in the store but
// left out here, and counted in the warnings. When the range spans more
// than one limits state, each state's readings are certified on their own
// and the report of the worst verdict is returned, the others summed up in
// its warnings: a period of at-rest readings is never passed against the
// in-operation limits.
//
// A fixed counter's reading is often smaller than the single sample volume
// the plan needs (a 2.83 L/min counter gives 2.83 L a minute where ISO 6 at
// 5 µm needs about 68 L), so consecutive readings of a location under one
// limits state are pooled, counts and volumes summed, until each pooled
// sample reaches that volume. A short remainder at the end of a run is left
// out when the location has a full sample, and kept (so that the shortfall
// shows) when it has none.
func (s *Server) certifyStored(ctx context.Context, zone string, from, to time.Time) (classify.Report, *problem) {
	v, _ := s.zones.Zone(zone)
	if v.Class == nil && v.Grade == "" {
		return classify.Report{}, &problem{status: http.StatusBadRequest, msg: fmt.Sprintf("zone %q is unclassified: it has no class or grade to be certified against", zone)}
	}
	base := s.storedTarget(zone, v.ZoneView)
	plans := map[string]float64{}
	volumeFor := func(state string) (float64, error) {
		if l, ok := plans[state]; ok {
			return l, nil
		}
		t := base
		t.State = state
		plan, err := classify.MakePlan(t)
		if err != nil {
			return 0, err
		}
		plans[state] = plan.SampleVolumeL
		return plan.SampleVolumeL, nil
	}
	if _, err := volumeFor(base.State); err != nil {
		return classify.Report{}, &problem{status: http.StatusBadRequest, msg: fmt.Sprintf("zone %q cannot be certified: %v", zone, err)}
	}
	pooled, p := s.poolSamples(ctx, zone, v.Sizes, volumeFor, from, to)
	if p != nil {
		return classify.Report{}, p
	}
	if len(pooled.byState) == 0 {
		return classify.Report{}, &problem{status: http.StatusUnprocessableEntity, msg: fmt.Sprintf("zone %q has no usable readings in [%s, %s)%s", zone, from.Format("2006-01-02T15:04:05Z"), to.Format("2006-01-02T15:04:05Z"), leftOutNote(pooled.warnings))}
	}
	var reps []classify.Report
	for _, state := range sortedStates(pooled.byState) {
		t := base
		t.State = state
		rep, err := classify.CertifyWith(t, pooled.byState[state], classify.Options{Instruments: s.cfg.Instruments(zone)})
		if err != nil {
			return classify.Report{}, &problem{status: http.StatusUnprocessableEntity, msg: fmt.Sprintf("stored readings taken %s cannot be certified: %v", state, err)}
		}
		reps = append(reps, rep)
	}
	worst := 0
	for i, r := range reps {
		if verdictRank(r.Verdict) > verdictRank(reps[worst].Verdict) {
			worst = i
		}
	}
	rep := reps[worst]
	for i, r := range reps {
		if i != worst {
			rep.Warnings = append(rep.Warnings, fmt.Sprintf("the readings taken %s (%d pooled samples) are certified against that state's limits on their own: %s", r.State, len(pooled.byState[r.State]), r.Verdict))
		}
	}
	rep.Warnings = append(rep.Warnings, pooled.warnings...)
	return rep, nil
}

func leftOutNote(ws []string) string {
	if len(ws) == 0 {
		return ""
	}
	return " (" + strings.Join(ws, "; ") + ")"
}

// verdictRank orders verdicts from best to worst.
func verdictRank(v string) int {
	switch v {
	case "pass":
		return 0
	case "incomplete":
		return 1
	}
	return 2
}

func sortedStates(m map[string][]classify.Sample) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

// storedTarget is what a zone is certified against: its class or grade,
// state, sizes and area, and the nominal flow of its counters (defaults
// filled in as the alarm rules fill them).
func (s *Server) storedTarget(zone string, v alerts.ZoneView) classify.Target {
	target := classify.Target{Grade: v.Grade, State: v.LimitsState, Sizes: v.Sizes, AreaM2: v.AreaM2, Edition: classify.Edition(v.Edition)}
	if v.Class != nil {
		target.Class = *v.Class
	}
	for _, k := range s.cfg.Counters {
		if k.Zone == zone {
			target.FlowLPM = counterRule(k).NominalFlowLPM
			break
		}
	}
	if target.FlowLPM == 0 {
		target.FlowLPM = alerts.DefaultFlowLPM
	}
	return target
}

// counterRule is what the judge knows of a counter, with its defaults.
func counterRule(k collector.Counter) alerts.CounterRule {
	return alerts.CounterRule{ID: k.ID, Zone: k.Zone, NominalFlowLPM: k.FlowLPM, MaxPerM3: k.MaxPerM3, Interval: time.Duration(k.Interval)}.WithDefaults()
}

// pooledSamples are the stored readings pooled into planned samples per
// limits state, with what was left out.
type pooledSamples struct {
	byState  map[string][]classify.Sample
	warnings []string
}

// leftOut counts the readings a classification leaves out, by reason.
type leftOut struct{ maintenance, untrusted, missing int }

func (l leftOut) warnings() []string {
	var out []string
	if l.maintenance > 0 {
		out = append(out, fmt.Sprintf("%d readings taken in maintenance left out", l.maintenance))
	}
	if l.untrusted > 0 {
		out = append(out, fmt.Sprintf("%d untrusted readings (fault status, at or beyond the counter's maximum, flow off nominal) left out", l.untrusted))
	}
	if l.missing > 0 {
		out = append(out, fmt.Sprintf("%d readings without every zone size left out", l.missing))
	}
	return out
}

// poolSamples reads the zone's readings and pools each location's into
// samples of at least the plan's volume of the state they were taken in.
func (s *Server) poolSamples(ctx context.Context, zone string, sizes []float64, volumeFor func(string) (float64, error), from, to time.Time) (pooledSamples, *problem) {
	out := pooledSamples{byState: map[string][]classify.Sample{}}
	read := 0
	var skip leftOut
	rules := map[string]alerts.CounterRule{}
	for _, k := range s.cfg.Counters {
		rules[k.ID] = counterRule(k)
	}
	for _, c := range s.zoneCounters(zone, "") {
		var pool *classify.Sample
		poolState := ""
		full := map[string]int{}
		flush := func(end bool) {
			if pool == nil {
				return
			}
			if full[poolState] == 0 || !end {
				out.byState[poolState] = append(out.byState[poolState], *pool)
			} else {
				out.warnings = append(out.warnings, fmt.Sprintf("location %s: the last %s L taken %s (below the single sample volume) left out", c.location, fmtLitres(pool.VolumeL), poolState))
			}
			pool = nil
		}
		err := s.store.ScanReadings(c.id, from, to, func(rd store.Reading) error {
			if read++; read > maxClassificationReadings {
				return errTooManyReadings
			}
			if err := ctx.Err(); err != nil {
				return err
			}
			at := s.zones.OperatingAt(zone, rd.Time)
			if !at.Judged {
				skip.maintenance++
				return nil
			}
			obs := alerts.Observation{Counter: rd.Counter, Time: rd.Time, VolumeL: rd.VolumeL, Status: rd.Status, Sizes: rd.Sizes, PerM3: rd.PerM3()}
			if rules[c.id].Distrust(obs, rd.FlowLPM) != "" {
				skip.untrusted++
				return nil
			}
			counts, ok := countsAt(rd, sizes)
			if !ok {
				skip.missing++
				return nil
			}
			sampleL, err := volumeFor(at.Limits)
			if err != nil {
				return fmt.Errorf("%w: readings taken %s: %w", errPlan, at.Limits, err)
			}
			if pool != nil && poolState != at.Limits {
				flush(true)
			}
			if pool == nil {
				pool, poolState = &classify.Sample{Location: c.location, Counter: c.id, Time: rd.Time, Counts: make([]uint64, len(counts)),
					Ref: fmt.Sprintf("readings of %s from %s", c.id, rd.Time.UTC().Format("2006-01-02T15:04:05Z"))}, at.Limits
			}
			pool.VolumeL += rd.VolumeL
			for i, n := range counts {
				pool.Counts[i] += n
			}
			if pool.VolumeL >= sampleL*(1-1e-9) {
				full[poolState]++
				flush(false)
			}
			return nil
		})
		switch {
		case errors.Is(err, errTooManyReadings):
			return out, &problem{status: http.StatusBadRequest, field: "from", msg: fmt.Sprintf("from: the range holds more than %d readings; narrow it", maxClassificationReadings)}
		case errors.Is(err, errPlan):
			return out, &problem{status: http.StatusBadRequest, msg: fmt.Sprintf("zone %q cannot be certified: %v", zone, err)}
		case err != nil:
			return out, &problem{status: Errors.Status(err), msg: "reading the store: " + err.Error()}
		}
		flush(true)
	}
	out.warnings = append(out.warnings, skip.warnings()...)
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
