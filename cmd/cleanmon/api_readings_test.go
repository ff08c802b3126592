package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"net/url"
	"strings"
	"testing"
	"time"
)

type readingOut struct {
	Time               time.Time          `json:"time"`
	Counter            string             `json:"counter"`
	Location           string             `json:"location"`
	VolumeL            float64            `json:"volume_l"`
	Mode               string             `json:"mode"`
	Counts             map[string]uint64  `json:"counts"`
	ConcentrationPerM3 map[string]float64 `json:"concentration_per_m3"`
}

type rollupOut struct {
	Time      time.Time          `json:"time"`
	Step      string             `json:"step"`
	Counter   string             `json:"counter"`
	Location  string             `json:"location"`
	Samples   int                `json:"samples"`
	MeanPerM3 map[string]float64 `json:"mean_per_m3"`
	MaxPerM3  map[string]float64 `json:"max_per_m3"`
}

// perL is the concentration of n particles in 28.3 L, particles/m³
// (counts × 1000 / litres, common practice, no source).
func perL(n uint64) float64 { return float64(n) * 1000 / 28.3 }

func asm(counter string, at time.Time, c05 uint64) postedReading {
	return postedReading{Counter: counter, Time: rfcTime(at), VolumeL: 28.3, Counts: map[string]uint64{"0.3": c05 * 2, "0.5": c05, "1": c05 / 10, "5": 0}}
}

func q(kv ...string) string {
	v := url.Values{}
	for i := 0; i+1 < len(kv); i += 2 {
		v.Set(kv[i], kv[i+1])
	}
	return "?" + v.Encode()
}

func TestZoneReadings(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	base := time.Now().UTC().Truncate(time.Hour).Add(-3 * time.Hour)
	at := func(d time.Duration) time.Time { return base.Add(d) }
	// Posted out of order, in two requests; pc-asm-2 counts differentially.
	d.post(asm("pc-asm-1", at(3*time.Minute), 200), asm("pc-asm-1", at(10*time.Second), 100), asm("pc-asm-1", at(65*time.Minute), 50))
	d.post(asm("pc-asm-1", at(40*time.Second), 300),
		postedReading{Counter: "pc-asm-2", Time: rfcTime(at(20 * time.Second)), VolumeL: 28.3, Counts: map[string]uint64{"0.3": 10, "0.5": 40, "1": 9, "5": 1}})

	var rows []readingOut
	d.getJSON("/api/v1/zones/assembly/readings"+q("from", rfcTime(base), "to", rfcTime(at(2*time.Hour))), &rows)
	want := []struct {
		counter, loc string
		at           time.Duration
	}{
		{"pc-asm-1", "asm-1", 10 * time.Second}, {"pc-asm-2", "asm-2", 20 * time.Second}, {"pc-asm-1", "asm-1", 40 * time.Second},
		{"pc-asm-1", "asm-1", 3 * time.Minute}, {"pc-asm-1", "asm-1", 65 * time.Minute},
	}
	if len(rows) != len(want) {
		t.Fatalf("%d rows: %+v", len(rows), rows)
	}
	for i, w := range want {
		r := rows[i]
		if r.Counter != w.counter || r.Location != w.loc || !r.Time.Equal(at(w.at)) || r.Time.Location() != time.UTC || r.VolumeL != 28.3 {
			t.Errorf("row %d: %+v, want %v", i, r, w)
		}
	}
	diff := rows[1]
	if diff.Mode != "differential" || diff.Counts["0.5"] != 40 || diff.Counts["0.3"] != 10 || rows[0].Mode != "cumulative" {
		t.Errorf("counts as received: %+v", diff)
	}
	// Cumulative from differential: ≥0.3 µm = 10 + 40 + 9 + 1 = 60; ≥0.5 µm = 50.
	if math.Abs(diff.ConcentrationPerM3["0.3"]-perL(60)) > 1e-9 || math.Abs(diff.ConcentrationPerM3["0.5"]-perL(50)) > 1e-9 {
		t.Errorf("concentration %v", diff.ConcentrationPerM3)
	}

	// Location filter, half-open range.
	d.getJSON("/api/v1/zones/assembly/readings"+q("from", rfcTime(base), "to", rfcTime(at(2*time.Hour)), "location", "asm-2"), &rows)
	if len(rows) != 1 || rows[0].Counter != "pc-asm-2" {
		t.Errorf("location filter: %+v", rows)
	}
	d.getJSON("/api/v1/zones/assembly/readings"+q("from", rfcTime(at(10*time.Second)), "to", rfcTime(at(3*time.Minute))), &rows)
	if len(rows) != 3 || !rows[0].Time.Equal(at(10*time.Second)) || !rows[2].Time.Equal(at(40*time.Second)) {
		t.Errorf("[from, to): %+v", rows)
	}
	code, _, b := d.do("GET", "/api/v1/zones/hood/readings", secretViewer, "", nil)
	if code != 200 || strings.TrimSpace(string(b)) != "[]" {
		t.Errorf("empty: %d %q", code, b)
	}

	// Rolled up. Means are of the cumulative concentration (per store rollups).
	type wantRow struct {
		at       time.Duration
		counter  string
		samples  int
		mean05   float64
		max05    float64
		stepName string
	}
	cases := []struct {
		step string
		want []wantRow
	}{
		{"1m", []wantRow{
			{0, "pc-asm-1", 2, (perL(100) + perL(300)) / 2, perL(300), "1m"},
			{0, "pc-asm-2", 1, perL(50), perL(50), "1m"},
			{3 * time.Minute, "pc-asm-1", 1, perL(200), perL(200), "1m"},
			{65 * time.Minute, "pc-asm-1", 1, perL(50), perL(50), "1m"},
		}},
		{"5m", []wantRow{ // aggregated from minute rollups
			{0, "pc-asm-1", 3, (perL(100) + perL(300) + perL(200)) / 3, perL(300), "5m"},
			{0, "pc-asm-2", 1, perL(50), perL(50), "5m"},
			{65 * time.Minute, "pc-asm-1", 1, perL(50), perL(50), "5m"},
		}},
		{"1h", []wantRow{
			{0, "pc-asm-1", 3, (perL(100) + perL(300) + perL(200)) / 3, perL(300), "1h"},
			{0, "pc-asm-2", 1, perL(50), perL(50), "1h"},
			{time.Hour, "pc-asm-1", 1, perL(50), perL(50), "1h"},
		}},
	}
	for _, c := range cases {
		t.Run("step "+c.step, func(t *testing.T) {
			var rs []rollupOut
			d.getJSON("/api/v1/zones/assembly/readings"+q("from", rfcTime(base), "to", rfcTime(at(2*time.Hour)), "step", c.step), &rs)
			if len(rs) != len(c.want) {
				t.Fatalf("%d rows: %+v", len(rs), rs)
			}
			for i, w := range c.want {
				r := rs[i]
				if !r.Time.Equal(at(w.at)) || r.Counter != w.counter || r.Samples != w.samples || r.Step != w.stepName ||
					math.Abs(r.MeanPerM3["0.5"]-w.mean05) > 1e-6 || math.Abs(r.MaxPerM3["0.5"]-w.max05) > 1e-6 {
					t.Errorf("row %d: %+v, want %+v", i, r, w)
				}
			}
		})
	}
	// A step of several hours folds hourly rollups into aligned buckets.
	var rs []rollupOut
	d.getJSON("/api/v1/zones/assembly/readings"+q("from", rfcTime(base), "to", rfcTime(at(2*time.Hour)), "step", "2h", "location", "asm-1"), &rs)
	total := 0
	for _, r := range rs {
		total += r.Samples
		if !r.Time.Equal(r.Time.Truncate(2 * time.Hour)) {
			t.Errorf("bucket %s not on a 2 h boundary", r.Time)
		}
	}
	if total != 4 || len(rs) < 1 || len(rs) > 2 {
		t.Errorf("2h: %+v", rs)
	}
}

func TestZoneReadingsBadQueries(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	cases := []struct {
		path  string
		code  int
		field string
	}{
		{"/api/v1/zones/lab/readings", 404, ""},
		{"/api/v1/zones/assembly/readings?from=yesterday", 400, "from"},
		{"/api/v1/zones/assembly/readings?to=2026-13-01T00:00:00Z", 400, "to"},
		{"/api/v1/zones/assembly/readings?from=2026-03-02T10:00:00Z&to=2026-03-02T10:00:00Z", 400, "from"},
		{"/api/v1/zones/assembly/readings?from=2026-03-02T11:00:00Z&to=2026-03-02T10:00:00Z", 400, "from"},
		{"/api/v1/zones/assembly/readings?step=30s", 400, "step"},
		{"/api/v1/zones/assembly/readings?step=90s", 400, "step"},
		{"/api/v1/zones/assembly/readings?step=hourly", 400, "step"},
		{"/api/v1/zones/assembly/readings?step=-1h", 400, "step"},
		{"/api/v1/zones/assembly/readings?location=hood-1", 400, "location"},
	}
	for _, c := range cases {
		t.Run(c.path, func(t *testing.T) {
			code, _, b := d.do("GET", c.path, secretViewer, "", nil)
			if code != c.code {
				t.Fatalf("%d %s, want %d", code, b, c.code)
			}
			e := decodeAPIError(t, b)
			if e.Field != c.field || (c.field != "" && !strings.HasPrefix(e.Error, c.field+":")) {
				t.Errorf("error %+v does not name %q", e, c.field)
			}
		})
	}
}

// TestZoneReadingsStreamAcrossChunks reads more rows than one chunk holds,
// across an hour boundary, and checks order and completeness.
func TestZoneReadingsStreamAcrossChunks(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	start := time.Now().UTC().Truncate(time.Hour).Add(-2*time.Hour + 40*time.Minute)
	const n = 3000
	var body bytes.Buffer
	for i := 0; i < n; i++ {
		fmt.Fprintf(&body, `{"counter":"pc-hood","time":%q,"volume_l":28.3,"counts":{"0.3":%d,"0.5":%d,"1":1,"5":0}}`+"\n",
			rfcTime(start.Add(time.Duration(i)*time.Second)), 10+i%7, 2+i%5)
	}
	code, _, b := d.do("POST", "/api/v1/readings", secretIngest, "application/x-ndjson", body.Bytes())
	if code != 200 || !strings.Contains(string(b), fmt.Sprintf(`"accepted":%d`, n)) {
		t.Fatalf("post: %d %s", code, b)
	}
	var rows []readingOut
	d.getJSON("/api/v1/zones/hood/readings"+q("from", rfcTime(start.Add(-time.Hour)), "to", rfcTime(start.Add(2*time.Hour))), &rows)
	if len(rows) != n {
		t.Fatalf("%d rows, want %d", len(rows), n)
	}
	for i, r := range rows {
		if !r.Time.Equal(start.Add(time.Duration(i) * time.Second)) {
			t.Fatalf("row %d at %s", i, r.Time)
		}
		if r.Counts["0.5"] != uint64(2+i%5) {
			t.Fatalf("row %d counts %v", i, r.Counts)
		}
	}
	// The same through rollups: 3000 one-second readings are 50 minutes.
	var rs []rollupOut
	d.getJSON("/api/v1/zones/hood/readings"+q("from", rfcTime(start.Add(-time.Hour)), "to", rfcTime(start.Add(2*time.Hour)), "step", "1m"), &rs)
	total := 0
	for i, r := range rs {
		total += r.Samples
		if i > 0 && !r.Time.After(rs[i-1].Time) {
			t.Fatalf("rollup rows out of order at %d", i)
		}
	}
	if len(rs) != 50 || total != n {
		t.Errorf("%d minute rows with %d samples", len(rs), total)
	}
	var check []json.RawMessage
	d.getJSON("/api/v1/zones/hood/readings"+q("from", rfcTime(start.Add(-time.Hour)), "to", rfcTime(start.Add(2*time.Hour)), "step", "1h"), &check)
	if len(check) != 2 {
		t.Errorf("%d hourly rows, want 2 (the readings straddle an hour)", len(check))
	}
}
