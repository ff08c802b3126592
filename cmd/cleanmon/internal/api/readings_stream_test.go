package api

import (
	"encoding/csv"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/store"
)

// twoCounterSite has a zone sampled by two counters with different
// channels, so a merged stream and the CSV columns per size both show.
const twoCounterSite = `site: "Veldmark Photonics, building C"
zones:
  - {id: hood, class: 5, area_m2: 2, sizes: ["0.5"], locations: [{id: h-1}, {id: h-2}]}
counters:
  - {id: pc-a, zone: hood, location: h-1, sizes: ["0.5", "5"]}
  - {id: pc-b, zone: hood, location: h-2, sizes: ["0.3", "0.5"]}
`

// rangeStore is a fake store holding readings per counter that keeps the
// store's range semantics ([from, to), a zero bound open) and counts
// the scans asked of it.
type rangeStore struct {
	by    map[string][]store.Reading
	scans int
}

func (rs *rangeStore) scan(counter string, from, to time.Time, fn func(store.Reading) error) error {
	rs.scans++
	for _, rd := range rs.by[counter] {
		if (!from.IsZero() && rd.Time.Before(from)) || (!to.IsZero() && !rd.Time.Before(to)) {
			continue
		}
		if err := fn(rd); err != nil {
			return err
		}
	}
	return nil
}

// twoCounterReadings: pc-a every 60 s, pc-b every 90 s from the same
// start, so some times tie (sorted by counter) and each counter has more
// readings than one read-ahead batch.
func twoCounterReadings(n int) (*rangeStore, time.Time) {
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	rs := &rangeStore{by: map[string][]store.Reading{}}
	for i := range n {
		rs.by["pc-a"] = append(rs.by["pc-a"], store.Reading{Counter: "pc-a", Time: t0.Add(time.Duration(i) * time.Minute),
			VolumeL: 28.3, Status: "ok", Sizes: []float64{0.5, 5}, Counts: []uint64{uint64(i), uint64(i % 7)}})
		rs.by["pc-b"] = append(rs.by["pc-b"], store.Reading{Counter: "pc-b", Time: t0.Add(time.Duration(i) * 90 * time.Second),
			VolumeL: 28.3, Differential: true, Sizes: []float64{0.3, 0.5}, Counts: []uint64{uint64(2 * i), uint64(i)}})
	}
	return rs, t0
}

func get(t *testing.T, h http.Handler, path string) *httptest.ResponseRecorder {
	t.Helper()
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest("GET", path, nil))
	return rec
}

// The raw stream merges the zone's counters in time order (ties by
// counter), returns each reading once across read-ahead batches, and
// copies the readings the store only lends.
func TestRawStreamMergesCounters(t *testing.T) {
	n := 2*rawBatch + 17
	rs, t0 := twoCounterReadings(n)
	h := mountTestServer(newTestServerSite(t, twoCounterSite, Options{Store: fakeStore{scanReadings: rs.scan}}))
	to := t0.Add(time.Duration(n) * 90 * time.Second)
	rec := get(t, h, "/api/v1/zones/hood/readings?from="+t0.Format(time.RFC3339)+"&to="+to.Format(time.RFC3339))
	if rec.Code != http.StatusOK {
		t.Fatalf("%d %s", rec.Code, rec.Body.String())
	}
	var rows []struct {
		Time    time.Time         `json:"time"`
		Counter string            `json:"counter"`
		Counts  map[string]uint64 `json:"counts"`
	}
	if err := json.Unmarshal(rec.Body.Bytes(), &rows); err != nil {
		t.Fatal(err)
	}
	if len(rows) != 2*n {
		t.Fatalf("%d rows, want %d", len(rows), 2*n)
	}
	seen := map[string]bool{}
	for i, r := range rows {
		k := r.Counter + r.Time.String()
		if seen[k] {
			t.Fatalf("row %d: %s at %s twice", i, r.Counter, r.Time)
		}
		seen[k] = true
		if i > 0 {
			p := rows[i-1]
			if r.Time.Before(p.Time) || (r.Time.Equal(p.Time) && r.Counter <= p.Counter) {
				t.Fatalf("row %d (%s %s) after row %d (%s %s)", i, r.Counter, r.Time, i-1, p.Counter, p.Time)
			}
		}
		if r.Counter == "pc-a" {
			want := uint64(r.Time.Sub(t0) / time.Minute)
			if r.Counts["0.5"] != want {
				t.Fatalf("row %d: pc-a count %d at %s, want %d", i, r.Counts["0.5"], r.Time, want)
			}
		}
	}
}

// A raw range over an empty stretch costs a few scans, not one per slice
// of time; 0001…9999 is refused naming the parameter.
func TestRawRangeBoundedAndSeeks(t *testing.T) {
	rs, t0 := twoCounterReadings(3)
	h := mountTestServer(newTestServerSite(t, twoCounterSite, Options{Store: fakeStore{scanReadings: rs.scan}}))
	from := t0.Add(-300 * 24 * time.Hour)
	rec := get(t, h, "/api/v1/zones/hood/readings?from="+from.Format(time.RFC3339)+"&to="+t0.Add(time.Hour).Format(time.RFC3339))
	if rec.Code != http.StatusOK || strings.Count(rec.Body.String(), `"time"`) != 6 {
		t.Fatalf("%d %s", rec.Code, rec.Body.String())
	}
	if rs.scans > 4 {
		t.Errorf("%d store scans for 300 empty days and 6 readings", rs.scans)
	}
	status, body := call(t, h, "GET", "/api/v1/zones/hood/readings?from=0001-01-02T00:00:00Z&to=9999-01-01T00:00:00Z", "", "")
	if status != http.StatusBadRequest || body["field"] != "to" {
		t.Errorf("0001…9999: %d %v", status, body)
	}
	// The bound is the site's to set.
	h = mountTestServer(newTestServerSite(t, twoCounterSite, Options{Store: fakeStore{scanReadings: rs.scan}, MaxRawRange: 24 * time.Hour}))
	status, body = call(t, h, "GET", "/api/v1/zones/hood/readings?from=2026-03-01T00:00:00Z&to=2026-03-03T00:00:00Z", "", "")
	if status != http.StatusBadRequest || body["field"] != "to" || !strings.Contains(body["error"].(string), "24h") {
		t.Errorf("two days over a 24 h bound: %d %v", status, body)
	}
}

// A rolled-up walk over a long range seeks to the next stored rollup
// rather than stepping through empty chunks.
func TestRollupWalkSeeks(t *testing.T) {
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	far := t0.Add(-5 * 365 * 24 * time.Hour)
	scans := 0
	st := fakeStore{scanRollups: func(counter string, step time.Duration, from, to time.Time, fn func(store.Rollup) error) error {
		scans++
		for _, at := range []time.Time{far, t0} {
			if counter == "pc-a" && !at.Before(from) && at.Before(to) {
				if err := fn(store.Rollup{Start: at, Step: step, Samples: 60, Sizes: []float64{0.5}, Mean: []float64{10}, Max: []float64{20}}); err != nil {
					return err
				}
			}
		}
		return nil
	}}
	h := mountTestServer(newTestServerSite(t, twoCounterSite, Options{Store: st}))
	rec := get(t, h, "/api/v1/zones/hood/readings?step=1h&from="+far.Format(time.RFC3339)+"&to="+t0.Add(time.Hour).Format(time.RFC3339))
	if rec.Code != http.StatusOK || strings.Count(rec.Body.String(), `"time"`) != 2 {
		t.Fatalf("%d %s", rec.Code, rec.Body.String())
	}
	if scans > 20 {
		t.Errorf("%d rollup scans for two rows five years apart", scans)
	}
}

// format=csv is a table a spreadsheet reads as it is: a header row, RFC
// 3339 times, one column per size of any counter, empty cells for sizes a
// counter does not have.
func TestReadingsCSV(t *testing.T) {
	rs, t0 := twoCounterReadings(3)
	h := mountTestServer(newTestServerSite(t, twoCounterSite, Options{Store: fakeStore{scanReadings: rs.scan}}))
	rec := get(t, h, "/api/v1/zones/hood/readings?format=csv&from="+t0.Format(time.RFC3339)+"&to="+t0.Add(time.Hour).Format(time.RFC3339))
	if rec.Code != http.StatusOK || !strings.HasPrefix(rec.Header().Get("Content-Type"), "text/csv") {
		t.Fatalf("%d %q %s", rec.Code, rec.Header().Get("Content-Type"), rec.Body.String())
	}
	recs, err := csv.NewReader(strings.NewReader(rec.Body.String())).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	want := "time,counter,location,volume_l,flow_lpm,sample_seconds,status,mode,count_0.3,count_0.5,count_5,per_m3_0.3,per_m3_0.5,per_m3_5"
	if got := strings.Join(recs[0], ","); got != want {
		t.Fatalf("header %s\nwant   %s", got, want)
	}
	if len(recs) != 7 {
		t.Fatalf("%d lines, want a header and 6 rows", len(recs))
	}
	// Row 2 is pc-a at t0+1 min: counts 1 (0.5 µm) and 1 (5 µm), no 0.3 µm.
	row := recs[3]
	if _, err := time.Parse(time.RFC3339, row[0]); err != nil {
		t.Errorf("time %q: %v", row[0], err)
	}
	if row[1] != "pc-a" || row[2] != "h-1" || row[8] != "" || row[9] != "1" || row[10] != "1" || row[11] != "" {
		t.Errorf("pc-a row %q", row)
	}
	// 1 particle in 28.3 L is 1000/28.3 = 35.33… per m³ (ISO 14644-1
	// counts per cubic metre: 1 m³ = 1000 L).
	if v, err := strconv.ParseFloat(row[12], 64); err != nil || v < 35.33 || v > 35.34 {
		t.Errorf("per_m3_0.5 %q", row[12])
	}
	status, body := call(t, h, "GET", "/api/v1/zones/hood/readings?format=xml", "", "")
	if status != http.StatusBadRequest || body["field"] != "format" {
		t.Errorf("format=xml: %d %v", status, body)
	}
}

// A token running as many heavy queries as allowed gets 429 with
// Retry-After for one more; another token is not held back, and the slot
// is free again once a query ends.
func TestHeavyQueriesPerToken(t *testing.T) {
	release := make(chan struct{})
	var started sync.WaitGroup
	started.Add(2)
	var held atomic.Int32
	st := fakeStore{scanReadings: func(counter string, from, to time.Time, fn func(store.Reading) error) error {
		if counter == "pc-a" && held.Add(1) <= 2 {
			started.Done()
			<-release
		}
		return nil
	}}
	h := mountTestServer(newTestServerSite(t, twoCounterSite, Options{Store: st, HeavyPerToken: 2}))
	as := func(token string) *httptest.ResponseRecorder {
		req := httptest.NewRequest("GET", "/api/v1/zones/hood/readings", nil)
		req = httpx.WithIdentity(req, &httpx.Identity{Token: token})
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		return rec
	}
	var wg sync.WaitGroup
	for range 2 {
		wg.Go(func() {
			if rec := as("dashboard"); rec.Code != http.StatusOK {
				t.Errorf("held query: %d", rec.Code)
			}
		})
	}
	started.Wait()
	rec := as("dashboard")
	if rec.Code != http.StatusTooManyRequests || rec.Header().Get("Retry-After") == "" {
		t.Errorf("third query: %d, Retry-After %q", rec.Code, rec.Header().Get("Retry-After"))
	}
	if rec := as("lims"); rec.Code == http.StatusTooManyRequests {
		t.Error("another token was held back")
	}
	close(release)
	wg.Wait()
	if rec := as("dashboard"); rec.Code != http.StatusOK {
		t.Errorf("after the others ended: %d", rec.Code)
	}
}
