package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"sort"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/classify"
	"cleanmon/store"
)

// defaultSpan is the range of a query that gives no from or to.
const defaultSpan = 24 * time.Hour

// rawChunk is the slice of time read per step of a raw stream: the
// readings of all the zone's counters in it are merged in memory, so it
// bounds memory by rate, not by the range asked for.
const rawChunk = time.Hour

// rollupChunkSteps is the same bound for rolled-up rows, in steps.
const rollupChunkSteps = 64

// counterRef is a counter of a zone and the location it samples.
type counterRef struct{ id, location string }

// zoneCounters lists the counters of a zone, optionally at one location.
func (s *server) zoneCounters(zone, location string) []counterRef {
	var out []counterRef
	for _, k := range s.cfg.Counters {
		if k.Zone == zone && (location == "" || counterLocation(k) == location) {
			out = append(out, counterRef{k.ID, counterLocation(k)})
		}
	}
	return out
}

// queryRange reads from and to (RFC 3339; default the last 24 h). A bad
// value is answered here with a 400 naming the parameter.
func (s *server) queryRange(w http.ResponseWriter, r *http.Request) (from, to time.Time, ok bool) {
	q := r.URL.Query()
	parse := func(name string) (time.Time, bool, bool) {
		v := q.Get(name)
		if v == "" {
			return time.Time{}, false, true
		}
		t, err := time.Parse(time.RFC3339Nano, v)
		if err != nil {
			writeFieldError(w, name, fmt.Sprintf("%q is not an RFC 3339 time such as 2026-03-02T10:00:00Z", v))
			return time.Time{}, false, false
		}
		return t.UTC(), true, true
	}
	from, hasFrom, ok1 := parse("from")
	if !ok1 {
		return
	}
	to, hasTo, ok2 := parse("to")
	if !ok2 {
		return
	}
	if !hasTo {
		to = s.now().UTC()
	}
	if !hasFrom {
		from = to.Add(-defaultSpan)
	}
	if !from.Before(to) {
		writeFieldError(w, "from", fmt.Sprintf("%s is not before to (%s)", from.Format(time.RFC3339), to.Format(time.RFC3339)))
		return
	}
	return from, to, true
}

// zoneAndLocation resolves {zone} and the location filter.
func (s *server) zoneAndLocation(w http.ResponseWriter, r *http.Request) (zone, location string, ok bool) {
	zone = chi.URLParam(r, "zone")
	z, found := s.cfg.zone(zone)
	if !found {
		writeError(w, http.StatusNotFound, fmt.Sprintf("unknown zone %q", zone))
		return "", "", false
	}
	location = r.URL.Query().Get("location")
	if location != "" {
		known := false
		for _, l := range z.Locations {
			known = known || l.ID == location
		}
		if !known {
			writeFieldError(w, "location", fmt.Sprintf("%q is not a location of zone %q", location, zone))
			return "", "", false
		}
	}
	return zone, location, true
}

// parseStep reads step: empty for raw readings; otherwise whole minutes,
// served from minute rollups, or whole hours, served from hourly ones.
func parseStep(v string) (step, source time.Duration, err error) {
	if v == "" {
		return 0, 0, nil
	}
	d, err := time.ParseDuration(v)
	if err != nil {
		return 0, 0, fmt.Errorf("%q is not a duration such as 1m or 1h", v)
	}
	switch {
	case d <= 0 || d%time.Minute != 0:
		return 0, 0, fmt.Errorf("%s: a step is a whole number of minutes (1m) or hours (1h)", v)
	case d > 366*24*time.Hour:
		return 0, 0, fmt.Errorf("%s: longer than a year", v)
	case d%time.Hour == 0:
		return d, time.Hour, nil
	}
	return d, time.Minute, nil
}

// rowStream writes a JSON array one element at a time, so that a large
// answer never sits in memory. The status line goes out with the first
// row, so an error before it can still be an ordinary error answer.
type rowStream struct {
	w    http.ResponseWriter
	enc  *json.Encoder
	rows int
}

func newRowStream(w http.ResponseWriter) *rowStream {
	return &rowStream{w: w, enc: json.NewEncoder(w)}
}

func (rs *rowStream) begin() {
	rs.w.Header().Set("Content-Type", "application/json")
	rs.w.Header().Set("Cache-Control", "no-store")
	rs.w.WriteHeader(http.StatusOK)
	rs.w.Write([]byte("["))
}

func (rs *rowStream) row(v any) error {
	if rs.rows == 0 {
		rs.begin()
	} else if _, err := rs.w.Write([]byte(",")); err != nil {
		return err
	}
	rs.rows++
	return rs.enc.Encode(v)
}

func (rs *rowStream) end() {
	if rs.rows == 0 {
		rs.begin()
	}
	rs.w.Write([]byte("]\n"))
}

// fail ends a stream that broke: before the first row it is an error
// answer; after it the connection is cut, so the client sees a broken
// answer rather than a complete-looking short one.
func (rs *rowStream) fail(err error) {
	if rs.rows == 0 {
		writeError(rs.w, errorStatus(err), "reading the store: "+err.Error())
		return
	}
	panic(http.ErrAbortHandler)
}

// readingRow is one raw reading of GET .../readings.
type readingRow struct {
	Time               time.Time          `json:"time"`
	Counter            string             `json:"counter"`
	Location           string             `json:"location"`
	VolumeL            float64            `json:"volume_l"`
	FlowLPM            float64            `json:"flow_lpm,omitempty"`
	SampleSeconds      float64            `json:"sample_seconds,omitempty"`
	Status             string             `json:"status,omitempty"`
	Mode               string             `json:"mode"`
	Counts             map[string]uint64  `json:"counts"`
	ConcentrationPerM3 map[string]float64 `json:"concentration_per_m3"`
}

// rollupRow is one rolled-up row of GET .../readings?step=.
type rollupRow struct {
	Time      time.Time          `json:"time"`
	Step      string             `json:"step"`
	Counter   string             `json:"counter"`
	Location  string             `json:"location"`
	Samples   int                `json:"samples"`
	MeanPerM3 map[string]float64 `json:"mean_per_m3"`
	MaxPerM3  map[string]float64 `json:"max_per_m3"`
}

var errStreamCancelled = errors.New("request cancelled")

// zoneReadings is GET /api/v1/zones/{zone}/readings.
func (s *server) zoneReadings(w http.ResponseWriter, r *http.Request) {
	zone, location, ok := s.zoneAndLocation(w, r)
	if !ok {
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	step, source, err := parseStep(r.URL.Query().Get("step"))
	if err != nil {
		writeFieldError(w, "step", err.Error())
		return
	}
	counters := s.zoneCounters(zone, location)
	rs := newRowStream(w)
	if step == 0 {
		err = s.streamRaw(r, rs, counters, from, to)
	} else {
		err = s.streamRollups(r, rs, counters, step, source, from, to)
	}
	if err != nil {
		if !errors.Is(err, errStreamCancelled) {
			s.log.Error("readings stream failed", "zone", zone, "rows", rs.rows, "err", err)
		}
		rs.fail(err)
		return
	}
	rs.end()
}

func (s *server) streamRaw(r *http.Request, rs *rowStream, counters []counterRef, from, to time.Time) error {
	var buf []readingRow
	for a := from; a.Before(to); {
		b := a.Add(rawChunk)
		if b.After(to) {
			b = to
		}
		buf = buf[:0]
		for _, c := range counters {
			err := s.store.ScanReadings(c.id, a, b, func(rd store.Reading) error {
				buf = append(buf, rawRow(rd, c.location))
				return nil
			})
			if err != nil {
				return err
			}
		}
		sort.SliceStable(buf, func(i, j int) bool {
			if !buf[i].Time.Equal(buf[j].Time) {
				return buf[i].Time.Before(buf[j].Time)
			}
			return buf[i].Counter < buf[j].Counter
		})
		for i := range buf {
			if r.Context().Err() != nil {
				return errStreamCancelled
			}
			if err := rs.row(&buf[i]); err != nil {
				return err
			}
		}
		if r.Context().Err() != nil {
			return errStreamCancelled
		}
		a = b
	}
	return nil
}

func rawRow(rd store.Reading, location string) readingRow {
	row := readingRow{
		Time: rd.Time.UTC(), Counter: rd.Counter, Location: location, VolumeL: rd.VolumeL,
		FlowLPM: rd.FlowLPM, SampleSeconds: rd.SampleSeconds, Status: rd.Status, Mode: "cumulative",
		Counts: make(map[string]uint64, len(rd.Sizes)), ConcentrationPerM3: make(map[string]float64, len(rd.Sizes)),
	}
	if rd.Differential {
		row.Mode = "differential"
	}
	per := rd.PerM3()
	for i, size := range rd.Sizes {
		k := classify.FormatSize(size)
		row.Counts[k] = rd.Counts[i]
		row.ConcentrationPerM3[k] = per[i]
	}
	return row
}

// rollupAgg gathers the source rollups of one output row.
type rollupAgg struct {
	start   time.Time
	counter string
	loc     string
	samples int
	sum     map[string]float64
	n       map[string]int
	max     map[string]float64
}

func (s *server) streamRollups(r *http.Request, rs *rowStream, counters []counterRef, step, source time.Duration, from, to time.Time) error {
	for a := from; a.Before(to); {
		// Chunks end on step boundaries so that no output row straddles two.
		b := a.Truncate(step).Add(rollupChunkSteps * step)
		if b.After(to) {
			b = to
		}
		aggs := map[[2]string]*rollupAgg{}
		for _, c := range counters {
			err := s.store.ScanRollups(c.id, source, a, b, func(ru store.Rollup) error {
				start := ru.Start.UTC().Truncate(step)
				key := [2]string{start.Format(time.RFC3339Nano), c.id}
				g := aggs[key]
				if g == nil {
					g = &rollupAgg{start: start, counter: c.id, loc: c.location,
						sum: map[string]float64{}, n: map[string]int{}, max: map[string]float64{}}
					aggs[key] = g
				}
				g.samples += ru.Samples
				for i, size := range ru.Sizes {
					k := classify.FormatSize(size)
					n := ru.Samples
					if i < len(ru.SizeSamples) {
						n = ru.SizeSamples[i]
					}
					g.sum[k] += ru.Mean[i] * float64(n)
					g.n[k] += n
					if m, seen := g.max[k]; !seen || ru.Max[i] > m {
						g.max[k] = ru.Max[i]
					}
				}
				return nil
			})
			if err != nil {
				return err
			}
		}
		rows := make([]*rollupAgg, 0, len(aggs))
		for _, g := range aggs {
			rows = append(rows, g)
		}
		sort.Slice(rows, func(i, j int) bool {
			if !rows[i].start.Equal(rows[j].start) {
				return rows[i].start.Before(rows[j].start)
			}
			if rows[i].loc != rows[j].loc {
				return rows[i].loc < rows[j].loc
			}
			return rows[i].counter < rows[j].counter
		})
		for _, g := range rows {
			if r.Context().Err() != nil {
				return errStreamCancelled
			}
			row := rollupRow{Time: g.start, Step: formatStep(step), Counter: g.counter, Location: g.loc,
				Samples: g.samples, MeanPerM3: map[string]float64{}, MaxPerM3: g.max}
			for k, sum := range g.sum {
				if g.n[k] > 0 {
					row.MeanPerM3[k] = sum / float64(g.n[k])
				}
			}
			if err := rs.row(&row); err != nil {
				return err
			}
		}
		a = b
	}
	return nil
}

// formatStep writes a step the way it is asked for: "15m", "1h", "24h".
func formatStep(d time.Duration) string {
	if d%time.Hour == 0 {
		return fmt.Sprintf("%dh", d/time.Hour)
	}
	return fmt.Sprintf("%dm", d/time.Minute)
}
