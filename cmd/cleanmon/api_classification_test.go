package main

import (
	"math"
	"strings"
	"testing"
	"time"
)

type classificationOut struct {
	Verdict           string              `json:"verdict"`
	Class             *float64            `json:"class"`
	Grade             *string             `json:"grade"`
	Edition           string              `json:"edition"`
	State             string              `json:"state"`
	RequiredLocations int                 `json:"required_locations"`
	LimitsPerM3       map[string]*float64 `json:"limits_per_m3"`
	Locations         []struct {
		ID        string             `json:"id"`
		Samples   int                `json:"samples"`
		VolumeL   float64            `json:"volume_l"`
		MeanPerM3 map[string]float64 `json:"mean_per_m3"`
		Pass      bool               `json:"pass"`
	} `json:"locations"`
	Problems []string `json:"problems"`
	Warnings []string `json:"warnings"`
}

func TestZoneClassification(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	base := time.Now().UTC().Truncate(time.Hour).Add(-4 * time.Hour)
	hood := func(at time.Duration, c05, c1 uint64, status string) postedReading {
		return postedReading{Counter: "pc-hood", Time: rfcTime(base.Add(at)), VolumeL: 28.3, Status: status,
			Counts: map[string]uint64{"0.3": 4 * c05, "0.5": c05, "1": c1, "5": 0}}
	}
	// Hour 0: three clean samples and one the counter flagged as a fault.
	// Hour 1: three samples above the ISO 5 limit at 0.5 µm.
	d.post(hood(0, 50, 10, ""), hood(time.Minute, 40, 8, ""), hood(2*time.Minute, 60, 12, ""), hood(3*time.Minute, 5000, 900, "fault"))
	d.post(hood(time.Hour, 150, 10, ""), hood(time.Hour+time.Minute, 120, 9, ""), hood(time.Hour+2*time.Minute, 90, 11, ""))
	// Grade B at rest: pc-fill samples 2.83 L a minute.
	for i := 0; i < 5; i++ {
		d.post(postedReading{Counter: "pc-fill", Time: rfcTime(base.Add(time.Duration(i) * time.Minute)), VolumeL: 2.83,
			Counts: map[string]uint64{"0.5": 5, "5": 0}})
	}

	hourRange := func(h int) string {
		return q("from", rfcTime(base.Add(time.Duration(h)*time.Hour)), "to", rfcTime(base.Add(time.Duration(h+1)*time.Hour)))
	}
	var rep classificationOut
	d.getJSON("/api/v1/zones/hood/classification"+hourRange(0), &rep)
	// ISO 14644-1:2015 Table A.1: ≤ 2 m² → 1 location. ISO 5 limits
	// 3 520 /m³ at 0.5 µm and 832 at 1 µm (Table 1). Single sample volume
	// 20/832 × 1000 ≈ 24.04 L, so each 28.3 L reading is a
	// sample of its own. Mean at 0.5 µm: (50 + 40 + 60)/3 per 28.3 L.
	if rep.Verdict != "pass" || rep.Class == nil || *rep.Class != 5 || rep.RequiredLocations != 1 || len(rep.Locations) != 1 ||
		rep.Locations[0].ID != "hood-1" || rep.Locations[0].Samples != 3 || !rep.Locations[0].Pass || *rep.LimitsPerM3["0.5"] != 3520 {
		t.Fatalf("hour 0: %+v", rep)
	}
	if m := rep.Locations[0].MeanPerM3["0.5"]; math.Abs(m-perL(50)) > 1e-6 {
		t.Errorf("mean %v, want %v", m, perL(50))
	}
	if !strings.Contains(strings.Join(rep.Warnings, "|"), "1 untrusted readings (fault status") {
		t.Errorf("warnings %q", rep.Warnings)
	}

	d.getJSON("/api/v1/zones/hood/classification"+hourRange(1), &rep)
	// (150 + 120 + 90)/3 = 120 per 28.3 L ≈ 4 240 /m³ > 3 520.
	if rep.Verdict != "fail" || rep.Locations[0].Pass || len(rep.Problems) == 0 || !strings.Contains(rep.Problems[0], "exceeds the limit") {
		t.Fatalf("hour 1: %+v", rep)
	}

	d.getJSON("/api/v1/zones/fill/classification"+hourRange(0), &rep)
	// Grade B at rest (EU GMP Annex 1 (2022) classification: 3 520 /m³ at
	// 0.5 µm, 5 µm not specified): the single sample volume
	// is 20/3520 × 1000 ≈ 5.68 L. Two 2.83 L readings (5.66 L) fall just
	// short, so three are pooled into one sample of 8.49 L and the last
	// two are left out.
	if rep.Grade == nil || *rep.Grade != "B" || rep.State != "at-rest" || len(rep.Locations) != 1 || rep.Locations[0].Samples != 1 ||
		math.Abs(rep.Locations[0].VolumeL-8.49) > 1e-9 {
		t.Fatalf("fill: %+v", rep)
	}
	if !strings.Contains(strings.Join(rep.Warnings, "|"), "location f-1: the last 5.66 L") {
		t.Errorf("fill warnings %q", rep.Warnings)
	}

	cases := []struct {
		path  string
		code  int
		field string
		msg   string
	}{
		{"/api/v1/zones/corridor/classification", 400, "", "unclassified"},
		{"/api/v1/zones/lab/classification", 404, "", "unknown zone"},
		{"/api/v1/zones/hood/classification?location=hood-1", 400, "location", "every location"},
		{"/api/v1/zones/hood/classification?from=soon", 400, "from", "RFC 3339"},
		{"/api/v1/zones/hood/classification" + hourRange(2), 422, "", "no usable readings"},
	}
	for _, c := range cases {
		code, _, b := d.do("GET", c.path, secretViewer, "", nil)
		if code != c.code {
			t.Errorf("%s: %d %s, want %d", c.path, code, b, c.code)
			continue
		}
		if e := decodeAPIError(t, b); e.Field != c.field || !strings.Contains(e.Error, c.msg) {
			t.Errorf("%s: %+v, want field %q and %q", c.path, e, c.field, c.msg)
		}
	}
}
