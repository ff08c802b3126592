package api

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"net/http"
	"slices"
	"sort"
	"strconv"
	"time"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/store"
)

// rollupChunkSteps is the same bound for rolled-up rows, in steps: a
// month of hours (744 rows a counter held at once). Each chunk costs two
// store scans per counter (where the data starts, then the rows), so at
// 64 steps a year of hourly rows took 274 scans and a quarter of a second
// through the API against 11 ms in the store.
const rollupChunkSteps = 744

// zoneCounters lists the counters of a zone, optionally at one location.
func (s *Server) zoneCounters(zone, location string) []counterRef {
	var out []counterRef
	for _, k := range s.cfg.Counters {
		if k.Zone == zone && (location == "" || site.CounterLocation(k) == location) {
			out = append(out, newCounterRef(k.ID, site.CounterLocation(k)))
		}
	}
	return out
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

// The rows of GET .../readings are written by hand rather than through
// encoding/json: a year of one location is half a million rows, and
// reflection over per-row maps made that answer several times slower than
// the store can read it. The shapes are the JSON objects the API documents;
// api_readings_json_test.go checks them against encoding/json.

// counterRef is a counter of a zone and the location it samples, with both
// names already JSON-encoded for the row writers.
type counterRef struct {
	id, location         string
	idJSON, locationJSON []byte
	// The volume, flow and sample time of a counter's readings are nearly
	// always those of the reading before: their text is kept and reused
	// (the shortest float form is most of a row's formatting).
	vol, flow, secs floatText
}

// floatText is the JSON text of the last float written through it.
type floatText struct {
	v    float64
	text []byte
}

func (ft *floatText) append(b []byte, v float64) []byte {
	if ft.text == nil || v != ft.v || math.Signbit(v) != math.Signbit(ft.v) {
		ft.v, ft.text = v, httpx.AppendFloat(ft.text[:0], v)
	}
	return append(b, ft.text...)
}

func newCounterRef(id, location string) counterRef {
	a, _ := json.Marshal(id)
	b, _ := json.Marshal(location)
	return counterRef{id: id, location: location, idJSON: a, locationJSON: b}
}

// appendReadingRow writes one raw reading: time, counter, location,
// volume_l, flow_lpm and sample_seconds when reported, status, mode, the
// counts as received and the cumulative concentration per size.
func appendReadingRow(b []byte, rd *store.Reading, c *counterRef, keys [][]byte) []byte {
	b = append(b, `{"time":`...)
	b = httpx.AppendTime(b, rd.Time)
	b = append(b, `,"counter":`...)
	b = append(b, c.idJSON...)
	b = append(b, `,"location":`...)
	b = append(b, c.locationJSON...)
	b = append(b, `,"volume_l":`...)
	b = c.vol.append(b, rd.VolumeL)
	if rd.FlowLPM != 0 {
		b = append(b, `,"flow_lpm":`...)
		b = c.flow.append(b, rd.FlowLPM)
	}
	if rd.SampleSeconds != 0 {
		b = append(b, `,"sample_seconds":`...)
		b = c.secs.append(b, rd.SampleSeconds)
	}
	if rd.Status != "" {
		b = append(b, `,"status":`...)
		b = strconv.AppendQuote(b, rd.Status) // one of a few ASCII words
	}
	if rd.Differential {
		b = append(b, `,"mode":"differential","counts":{`...)
	} else {
		b = append(b, `,"mode":"cumulative","counts":{`...)
	}
	for i, k := range keys {
		if i > 0 {
			b = append(b, ',')
		}
		b = append(b, k...)
		b = strconv.AppendUint(b, rd.Counts[i], 10)
	}
	b = append(b, `},"concentration_per_m3":`...)
	b = httpx.AppendSizeMap(b, keys, rd.PerM3())
	return append(b, '}')
}

// appendRollupRow writes one rolled-up row: time, step, counter, location,
// samples and the mean and max cumulative concentration per size.
func appendRollupRow(b []byte, g *rollupAgg, step string) []byte {
	b = append(b, `{"time":`...)
	b = httpx.AppendTime(b, g.start)
	b = append(b, `,"step":`...)
	b = strconv.AppendQuote(b, step)
	b = append(b, `,"counter":`...)
	b = append(b, g.ref.idJSON...)
	b = append(b, `,"location":`...)
	b = append(b, g.ref.locationJSON...)
	b = append(b, `,"samples":`...)
	b = strconv.AppendInt(b, int64(g.samples), 10)
	b = append(b, `,"mean_per_m3":{`...)
	first := true
	for i, k := range g.keys {
		if g.n[i] == 0 {
			continue
		}
		if !first {
			b = append(b, ',')
		}
		first = false
		b = append(b, k...)
		b = httpx.AppendFloat(b, g.sum[i]/float64(g.n[i]))
	}
	b = append(b, `},"max_per_m3":{`...)
	first = true
	for i, k := range g.keys {
		if !g.seen[i] {
			continue
		}
		if !first {
			b = append(b, ',')
		}
		first = false
		b = append(b, k...)
		b = httpx.AppendFloat(b, g.max[i])
	}
	return append(b, "}}"...)
}

var errStreamCancelled = errors.New("request cancelled")

// zoneReadings is GET /api/v1/zones/{zone}/readings.
func (s *Server) zoneReadings(w http.ResponseWriter, r *http.Request) {
	zone := zoneOf(r).ID
	location, ok := location(w, r, zoneOf(r))
	if !ok {
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	step, source, err := parseStep(r.URL.Query().Get("step"))
	if err != nil {
		httpx.WriteFieldError(w, "step", err.Error())
		return
	}
	csv, ok := wantCSV(w, r)
	if !ok {
		return
	}
	if step == 0 {
		if err := store.CheckRange(from, to, s.maxRawRange); err != nil {
			var re *store.RangeError
			if errors.As(err, &re) {
				httpx.WriteFieldError(w, re.Param, re.Reason)
				return
			}
			Errors.Write(w, "", err)
			return
		}
	}
	counters := s.zoneCounters(zone, location)
	var rs rowSink
	switch js := httpx.NewRowStream(w, Errors); {
	case csv:
		cs := newCSVStream(w)
		rs = cs
		if step == 0 {
			err = s.streamRawCSV(r, cs, counters, from, to)
		} else {
			err = s.streamRollupsCSV(r, cs, counters, step, source, from, to)
		}
	case step == 0:
		rs = js
		err = s.streamRaw(r, js, counters, from, to, appendReadingRow)
	default:
		rs = js
		err = s.streamRollups(r, js, counters, step, source, from, to, appendRollupRow)
	}
	if err != nil {
		if !errors.Is(err, errStreamCancelled) {
			s.log.Error("readings stream failed", "zone", zone, "rows", rs.Rows(), "err", err)
		}
		rs.Fail(err)
		return
	}
	rs.End()
}

// rollupAgg gathers the source rollups of one output row, per size.
type rollupAgg struct {
	start   time.Time
	ref     *counterRef
	samples int
	sizes   []float64
	keys    [][]byte
	sum     []float64 // Σ mean × samples
	n       []int
	max     []float64
	seen    []bool
}

// add folds one source rollup in; sizes are matched by value, so a counter
// whose channels changed within the row still adds up per size.
func (g *rollupAgg) add(ru *store.Rollup) {
	g.samples += ru.Samples
	for i, size := range ru.Sizes {
		j := slices.Index(g.sizes, size)
		if j < 0 {
			j = len(g.sizes)
			g.sizes = append(g.sizes, size)
			g.keys = append(g.keys, []byte(strconv.Quote(classify.FormatSize(size))+":"))
			g.sum, g.n, g.max, g.seen = append(g.sum, 0), append(g.n, 0), append(g.max, 0), append(g.seen, false)
		}
		n := ru.Samples
		if i < len(ru.SizeSamples) {
			n = ru.SizeSamples[i]
		}
		g.sum[j] += ru.Mean[i] * float64(n)
		g.n[j] += n
		if !g.seen[j] || ru.Max[i] > g.max[j] {
			g.max[j], g.seen[j] = ru.Max[i], true
		}
	}
}

func (s *Server) streamRollups(r *http.Request, rs rowSink, counters []counterRef, step, source time.Duration, from, to time.Time, row func([]byte, *rollupAgg, string) []byte) error {
	type key struct {
		start int64
		c     int
	}
	stepName := formatStep(step)
	for a := from; a.Before(to); {
		// An empty stretch is jumped over, not walked a chunk at a time.
		next, found, err := s.firstRollup(counters, source, a, to)
		if err != nil || !found {
			return err
		}
		if t := next.UTC().Truncate(step); t.After(a) {
			a = t
		}
		// Chunks end on step boundaries so that no output row straddles two.
		b := a.Truncate(step).Add(rollupChunkSteps * step)
		if b.After(to) {
			b = to
		}
		aggs := map[key]*rollupAgg{}
		var rows []*rollupAgg
		for ci := range counters {
			err := s.store.ScanRollups(counters[ci].id, source, a, b, func(ru store.Rollup) error {
				start := ru.Start.UTC().Truncate(step)
				k := key{start.UnixNano(), ci}
				g := aggs[k]
				if g == nil {
					g = &rollupAgg{start: start, ref: &counters[ci]}
					aggs[k] = g
					rows = append(rows, g)
				}
				g.add(&ru)
				return nil
			})
			if err != nil {
				return err
			}
		}
		sort.SliceStable(rows, func(i, j int) bool {
			if !rows[i].start.Equal(rows[j].start) {
				return rows[i].start.Before(rows[j].start)
			}
			if rows[i].ref.location != rows[j].ref.location {
				return rows[i].ref.location < rows[j].ref.location
			}
			return rows[i].ref.id < rows[j].ref.id
		})
		for _, g := range rows {
			if err := rs.Row(func(b []byte) []byte { return row(b, g, stepName) }); err != nil {
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

// formatStep writes a step the way it is asked for: "15m", "1h", "24h".
func formatStep(d time.Duration) string {
	if d%time.Hour == 0 {
		return fmt.Sprintf("%dh", d/time.Hour)
	}
	return fmt.Sprintf("%dm", d/time.Minute)
}
