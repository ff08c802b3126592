package api

import (
	"context"
	"errors"
	"net/http"
	"strconv"
	"time"

	"cleanmon/alerts"
	"cleanmon/alerts/investigate"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/report"
)

// The exposure of a run, as JSON. The shape is report.Exposure's: the
// report package renders this answer (HTML, PDF), so the types are
// declared once, there, and named here for this file's use.
type (
	exposureJSON      = report.Exposure
	exposureAlarmJSON = report.ExposureAlarm // ConditionGone: passed, latched, counted until acknowledged
	peakJSON          = report.Peak
)

// particleKinds are the alarm kinds about the room's particles: an
// excursion in the sense of the exposure report.
var particleKinds = map[string]bool{"excursion": true, "consecutive": true, "out-of-class": true, "trend": true}

// runExposure is GET /api/v1/runs/{id}/exposure.
func (s *Server) runExposure(w http.ResponseWriter, r *http.Request) {
	status, body := s.ExposureJSON(r.Context(), pathID(r))
	httpx.WriteRaw(w, status, body)
}

// ExposureJSON is the answer of GET /api/v1/runs/{id}/exposure, status and
// body, for the pages' report too: the alarms of the run's zone that
// overlapped it (edges included), its time by attention level and the peak
// concentration per size.
func (s *Server) ExposureJSON(ctx context.Context, id string) (int, []byte) {
	out, err := s.exposure(ctx, id)
	var b []byte
	if err != nil {
		b, _ = httpx.Marshal(httpx.ErrorBody{Error: err.Error()})
		return Errors.Status(err), b
	}
	b, err = httpx.Marshal(out)
	if err != nil {
		b, _ = httpx.Marshal(httpx.ErrorBody{Error: err.Error()})
		return http.StatusInternalServerError, b
	}
	return http.StatusOK, b
}

func (s *Server) exposure(ctx context.Context, id string) (exposureJSON, error) {
	run, err := s.store.Run(id)
	if err != nil {
		return exposureJSON{}, err
	}
	z, ok := s.cfg.Zone(run.Zone)
	if !ok {
		return exposureJSON{}, errors.New("run " + id + " names zone " + run.Zone + ", which the site no longer has")
	}
	now := s.now()
	until := run.End
	if run.Open() || until.After(now) {
		until = now
	}
	rec, err := s.readZone(ctx, run.Zone, zoneSizes(z), run.Start, until, true)
	if err != nil {
		return exposureJSON{}, err
	}
	alarms, err := s.alarmsOfZone(run.Zone, run.Start)
	if err != nil {
		return exposureJSON{}, err
	}
	ias := make([]investigate.Alarm, len(alarms))
	byID := map[string]alerts.Alarm{}
	for i, a := range alarms {
		ias[i] = exposureAlarm(a)
		byID[a.ID] = a
	}
	ir := investigate.Run{ID: run.ID, Zone: run.Zone, Start: run.Start, End: run.End, Product: run.Product, Lot: run.Lot}
	ex, err := investigate.RunExposure(ir, now, ias, levelTimeline(alarms, rec.First), rec.Locations)
	if err != nil {
		return exposureJSON{}, err
	}
	out := exposureJSON{Site: s.cfg.Site, Run: runObject(run), ZoneName: z.Name, Target: targetOf(z), Until: ex.Until, Generated: now.UTC(),
		Alarms: []exposureAlarmJSON{}, TimeByLevel: seconds(ex.TimeByLevel), Peaks: []peakJSON{}, Notes: []string{}, Caution: Caution}
	for _, a := range ex.Alarms {
		full := byID[a.ID]
		aj := exposureAlarmJSON{ID: a.ID, Kind: a.Kind, Level: a.Level, Location: a.Location, SizeUM: full.SizeUM, Since: a.Since,
			Peak: a.Peak, PeakTime: a.PeakTime, Excursion: particleKinds[a.Kind], ConditionGone: full.ConditionGone}
		if !a.Cleared.IsZero() {
			c := a.Cleared
			aj.Cleared = &c
		}
		if aj.Excursion {
			out.Excursions++
		}
		out.Alarms = append(out.Alarms, aj)
	}
	for _, p := range ex.Peaks {
		out.Peaks = append(out.Peaks, peakJSON{SizeUM: p.SizeUM, Location: p.Location, PerM3: p.Value, Time: p.Time})
	}
	if run.Open() {
		out.Notes = append(out.Notes, "the run is still open: the figures run to now and will change")
	}
	if rec.Faulty > 0 {
		out.Notes = append(out.Notes, strconv.Itoa(rec.Faulty)+" readings flagged faulty by their counter are left out of the peaks")
	}
	if rec.First.IsZero() {
		out.Notes = append(out.Notes, "no reading of the zone during the run: nothing is known of its air, and the time counts as unknown")
	}
	out.Notes = append(out.Notes, "an alarm counts from when its condition was first seen until it cleared; a latched alarm whose condition has passed counts until it is acknowledged")
	out.Notes = append(out.Notes, "time by attention level is reconstructed from the alarm journal: the worst open alarm of the zone, none between alarms, unknown before the first reading")
	return out, nil
}

func seconds(m map[string]time.Duration) map[string]float64 {
	out := map[string]float64{}
	for k, v := range m {
		out[k] = v.Seconds()
	}
	return out
}

func targetOf(z *alerts.ZoneConfig) string {
	switch {
	case z.Class != nil:
		return "ISO " + strconv.FormatFloat(*z.Class, 'f', -1, 64)
	case z.Grade != "":
		return "Grade " + z.Grade
	}
	return "unclassified"
}
