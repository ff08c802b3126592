package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"net/http"
	"slices"
	"sort"
	"strconv"
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

// zoneCounters lists the counters of a zone, optionally at one location.
func (s *server) zoneCounters(zone, location string) []counterRef {
	var out []counterRef
	for _, k := range s.cfg.Counters {
		if k.Zone == zone && (location == "" || counterLocation(k) == location) {
			out = append(out, newCounterRef(k.ID, counterLocation(k)))
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

// rowStream writes a JSON array one element at a time through a buffer,
// so that a large answer never sits in memory. The status line goes out
// with the first row, so an error before it can still be an ordinary
// error answer.
type rowStream struct {
	w    http.ResponseWriter
	bw   *bufio.Writer
	buf  []byte
	rows int
}

func newRowStream(w http.ResponseWriter) *rowStream {
	return &rowStream{w: w}
}

func (rs *rowStream) begin() {
	rs.w.Header().Set("Content-Type", "application/json")
	rs.w.Header().Set("Cache-Control", "no-store")
	rs.w.WriteHeader(http.StatusOK)
	rs.bw = bufio.NewWriterSize(rs.w, 64<<10)
	rs.bw.WriteByte('[')
}

// row writes one element that appendRow renders.
func (rs *rowStream) row(appendRow func([]byte) []byte) error {
	if rs.rows == 0 {
		rs.begin()
	} else if err := rs.bw.WriteByte(','); err != nil {
		return err
	}
	rs.rows++
	rs.buf = append(appendRow(rs.buf[:0]), '\n')
	_, err := rs.bw.Write(rs.buf)
	return err
}

func (rs *rowStream) end() {
	if rs.rows == 0 {
		rs.begin()
	}
	rs.bw.WriteString("]\n")
	rs.bw.Flush()
}

// fail ends a stream that broke: before the first row it is an error
// answer; after it the connection is cut, so the client sees a broken
// answer rather than a complete-looking short one.
func (rs *rowStream) fail(err error) {
	if rs.rows == 0 {
		writeError(rs.w, errorStatus(err), "reading the store: "+err.Error())
		return
	}
	rs.bw.Flush()
	panic(http.ErrAbortHandler)
}

// The rows of GET .../readings are written by hand rather than through
// encoding/json: a year of one location is half a million rows, and
// reflection over per-row maps made that answer several times slower than
// the store can read it. The shapes are the JSON objects of DESIGN.md §4;
// api_readings_json_test.go checks them against encoding/json.

// counterRef is a counter of a zone and the location it samples, with both
// names already JSON-encoded for the row writers.
type counterRef struct {
	id, location         string
	idJSON, locationJSON []byte
}

func newCounterRef(id, location string) counterRef {
	a, _ := json.Marshal(id)
	b, _ := json.Marshal(location)
	return counterRef{id: id, location: location, idJSON: a, locationJSON: b}
}

// sizeKeys caches the JSON keys (`"0.5":`) of a counter's channel sizes.
type sizeKeys struct {
	sizes []float64
	keys  [][]byte
}

func (k *sizeKeys) get(sizes []float64) [][]byte {
	if k.keys == nil || !slices.Equal(k.sizes, sizes) {
		k.sizes = append(k.sizes[:0], sizes...)
		k.keys = k.keys[:0]
		for _, s := range sizes {
			k.keys = append(k.keys, []byte(strconv.Quote(classify.FormatSize(s))+":"))
		}
	}
	return k.keys
}

// appendJSONFloat writes a float as encoding/json does; a value JSON
// cannot hold (NaN, ±Inf) becomes null rather than a broken document.
func appendJSONFloat(b []byte, f float64) []byte {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return append(b, "null"...)
	}
	abs := math.Abs(f)
	format := byte('f')
	if abs != 0 && (abs < 1e-6 || abs >= 1e21) {
		format = 'e'
	}
	b = strconv.AppendFloat(b, f, format, -1, 64)
	if format == 'e' {
		// e-09 becomes e-9, as encoding/json writes it
		n := len(b)
		if n >= 4 && b[n-4] == 'e' && b[n-3] == '-' && b[n-2] == '0' {
			b[n-2] = b[n-1]
			b = b[:n-1]
		}
	}
	return b
}

func appendJSONTime(b []byte, t time.Time) []byte {
	b = append(b, '"')
	b = t.UTC().AppendFormat(b, time.RFC3339Nano)
	return append(b, '"')
}

func appendSizeMap(b []byte, keys [][]byte, v []float64) []byte {
	b = append(b, '{')
	for i, k := range keys {
		if i > 0 {
			b = append(b, ',')
		}
		b = append(b, k...)
		b = appendJSONFloat(b, v[i])
	}
	return append(b, '}')
}

// appendReadingRow writes one raw reading: time, counter, location,
// volume_l, flow_lpm and sample_seconds when reported, status, mode, the
// counts as received and the cumulative concentration per size.
func appendReadingRow(b []byte, rd *store.Reading, c *counterRef, keys [][]byte) []byte {
	b = append(b, `{"time":`...)
	b = appendJSONTime(b, rd.Time)
	b = append(b, `,"counter":`...)
	b = append(b, c.idJSON...)
	b = append(b, `,"location":`...)
	b = append(b, c.locationJSON...)
	b = append(b, `,"volume_l":`...)
	b = appendJSONFloat(b, rd.VolumeL)
	if rd.FlowLPM != 0 {
		b = append(b, `,"flow_lpm":`...)
		b = appendJSONFloat(b, rd.FlowLPM)
	}
	if rd.SampleSeconds != 0 {
		b = append(b, `,"sample_seconds":`...)
		b = appendJSONFloat(b, rd.SampleSeconds)
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
	b = appendSizeMap(b, keys, rd.PerM3())
	return append(b, '}')
}

// appendRollupRow writes one rolled-up row: time, step, counter, location,
// samples and the mean and max cumulative concentration per size.
func appendRollupRow(b []byte, g *rollupAgg, step string) []byte {
	b = append(b, `{"time":`...)
	b = appendJSONTime(b, g.start)
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
		b = appendJSONFloat(b, g.sum[i]/float64(g.n[i]))
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
		b = appendJSONFloat(b, g.max[i])
	}
	return append(b, "}}"...)
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
	type item struct {
		rd store.Reading
		c  int // index into counters
	}
	var buf []item
	keys := make([]sizeKeys, len(counters))
	for a := from; a.Before(to); {
		b := a.Add(rawChunk)
		if b.After(to) {
			b = to
		}
		buf = buf[:0]
		for ci := range counters {
			err := s.store.ScanReadings(counters[ci].id, a, b, func(rd store.Reading) error {
				buf = append(buf, item{rd, ci})
				return nil
			})
			if err != nil {
				return err
			}
		}
		if len(counters) > 1 { // one counter's scan is already in time order
			sort.SliceStable(buf, func(i, j int) bool {
				if !buf[i].rd.Time.Equal(buf[j].rd.Time) {
					return buf[i].rd.Time.Before(buf[j].rd.Time)
				}
				return buf[i].rd.Counter < buf[j].rd.Counter
			})
		}
		for i := range buf {
			it := &buf[i]
			c := &counters[it.c]
			k := keys[it.c].get(it.rd.Sizes)
			if err := rs.row(func(b []byte) []byte { return appendReadingRow(b, &it.rd, c, k) }); err != nil {
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

func (s *server) streamRollups(r *http.Request, rs *rowStream, counters []counterRef, step, source time.Duration, from, to time.Time) error {
	type key struct {
		start int64
		c     int
	}
	stepName := formatStep(step)
	for a := from; a.Before(to); {
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
			if err := rs.row(func(b []byte) []byte { return appendRollupRow(b, g, stepName) }); err != nil {
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
