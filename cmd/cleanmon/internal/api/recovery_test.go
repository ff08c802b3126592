package api

import (
	"context"
	"encoding/json"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/alerts"
	"cleanmon/classify"
	"cleanmon/store"
)

// halving is a decay after a challenge that halves every 2 minutes from
// 352 000 /m³ (counts per 100 L), then settles on a background: n =
// ln 2 / 2 per minute, 100:1 in 2 × ln 100 / ln 2 = 13.2877 min (worked by
// hand). With the ISO 5 limit at 0.5 µm, 3 520 /m³ (ISO 14644-1:2015
// Table 1), as the floor, the fit uses the 7 points from 352 000 to 5 500.
var halving = []uint64{200, 15000, 35200, 17600, 8800, 4400, 2200, 1100, 550, 275, 260}

func recoveryStore(counts []uint64, start time.Time, status string) fakeStore {
	return fakeStore{scanReadings: func(counter string, from, to time.Time, fn func(store.Reading) error) error {
		if counter != "pc-hood" {
			return nil
		}
		for i, c := range counts {
			at := start.Add(time.Duration(i) * 2 * time.Minute)
			if at.Before(from) || !at.Before(to) {
				continue
			}
			if err := fn(store.Reading{Counter: counter, Time: at, VolumeL: 100, Status: status, Sizes: []float64{0.5}, Counts: []uint64{c}}); err != nil {
				return err
			}
		}
		return nil
	}}
}

func hoodView(string) (alerts.ZoneReport, bool) {
	five := 5.0
	return alerts.ZoneReport{ZoneView: alerts.ZoneView{ID: "hood", Class: &five, Sizes: []float64{0.5}, AreaM2: 2, LimitsState: "at-rest"}}, true
}

func TestZoneRecovery(t *testing.T) {
	start := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	h := newTestAPI(t, Options{Zones: fakeZones{zone: hoodView}, Store: recoveryStore(halving, start, "ok")})
	const path = "/api/v1/zones/hood/recovery?from=2026-03-02T07:00:00Z&to=2026-03-02T09:00:00Z"
	code, a := call(t, h, "GET", path, "", "")
	if code != 200 {
		t.Fatalf("%d %v", code, a)
	}
	if math.Abs(a["rate_per_min"].(float64)-math.Ln2/2) > 1e-9 || math.Abs(a["t100_min"].(float64)-13.2877) > 1e-4 ||
		a["points"] != 7.0 || a["floor_per_m3"] != 3520.0 || a["target_class"] != 5.0 || a["size_um"] != "0.5" ||
		len(a["series"].([]any)) != len(halving) || a["from_min"] != 4.0 || a["to_min"] != 16.0 {
		t.Errorf("recovery %v", a)
	}
	for _, tc := range []struct {
		query string
		code  int
		field string
	}{
		{"&size=9", 400, "size"},
		{"&target_class=10", 400, "target_class"},
		{"&location=nope", 400, "location"},
		{"&size=5", 422, ""},         // no 5 µm channel in these readings
		{"&target_class=9", 422, ""}, // ISO 9 at 0.5 µm is 35 200 000: every point below the floor
	} {
		code, body := call(t, h, "GET", path+tc.query, "", "")
		if code != tc.code || (tc.field != "" && body["field"] != tc.field) {
			t.Errorf("%s: %d %v, want %d naming %q", tc.query, code, body, tc.code, tc.field)
		}
	}
	// Fault readings are left out: nothing usable remains.
	h = newTestAPI(t, Options{Zones: fakeZones{zone: hoodView}, Store: recoveryStore(halving, start, "fault")})
	if code, body := call(t, h, "GET", path, "", ""); code != http.StatusUnprocessableEntity {
		t.Errorf("fault readings: %d %v", code, body)
	}
}

// The CLI and the route answer with the same FitRecoveryTest: the JSON keys
// are the ones the README documents.
func TestRecoveryAnswerKeys(t *testing.T) {
	var times []time.Time
	var conc []float64
	for i, c := range halving {
		times = append(times, time.Date(2026, 3, 2, 8, 2*i, 0, 0, time.UTC))
		conc = append(conc, float64(c)*10)
	}
	five := 5.0
	a, err := classify.FitRecoveryTest(times, conc, 0.5, &five)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := json.Marshal(a)
	for _, k := range []string{"size_um", "target_class", "floor_per_m3", "start", "rate_per_min", "t100_min", "c0_per_m3", "r_squared", "points", "from_min", "to_min", "series", "used", "minute", "per_m3"} {
		if !strings.Contains(string(b), `"`+k+`"`) {
			t.Errorf("answer lacks %q: %s", k, b)
		}
	}
	if _, err := classify.FitRecoveryTest(times[:2], conc[:2], 0.5, nil); err == nil {
		t.Error("two points fitted")
	}
}

// A zone whose counters carry calibration due dates is certified with
// them: a sample taken after the due date is a departure, and the zone
// that is within its limit is incomplete, not passed.
func TestClassificationInstruments(t *testing.T) {
	siteYAML := strings.Replace(testSite, `sizes: ["0.5"]}`+"\npressure", `sizes: ["0.5"], serial: VPC-1, calibration_due: 2026-03-01}`+"\npressure", 1)
	if siteYAML == testSite {
		t.Fatal("the test site changed: the counter line was not found")
	}
	start := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	clean := []uint64{10, 12, 9}
	s := newTestServerSite(t, siteYAML, Options{Zones: fakeZones{zone: hoodView}, Store: recoveryStore(clean, start, "ok")})
	status, body, rep := s.CertifyStored(context.Background(), "hood", "2026-03-02T07:00:00Z", "2026-03-02T09:00:00Z")
	if status != 200 || rep == nil {
		t.Fatalf("%d %s", status, body)
	}
	if rep.Verdict != "incomplete" || len(rep.Departures) != 1 || !strings.Contains(rep.Departures[0], "past its calibration due date 2026-03-01") ||
		len(rep.Instruments) != 1 || rep.Instruments[0].Serial != "VPC-1" {
		t.Errorf("verdict %s departures %v instruments %v", rep.Verdict, rep.Departures, rep.Instruments)
	}
	// The route gives the same answer.
	r := chi.NewRouter()
	s.Register(r)
	rec := httptest.NewRecorder()
	r.ServeHTTP(rec, httptest.NewRequest("GET", "/api/v1/zones/hood/classification?from=2026-03-02T07:00:00Z&to=2026-03-02T09:00:00Z", nil))
	if rec.Code != 200 || rec.Body.String() != string(body) {
		t.Errorf("route %d %s", rec.Code, rec.Body.String())
	}
	// Without due dates the same readings pass.
	s = newTestServer(t, Options{Zones: fakeZones{zone: hoodView}, Store: recoveryStore(clean, start, "ok")})
	if _, _, rep := s.CertifyStored(context.Background(), "hood", "2026-03-02T07:00:00Z", "2026-03-02T09:00:00Z"); rep == nil || rep.Verdict != "pass" {
		t.Errorf("without instruments: %+v", rep)
	}
}
