package api

import (
	"context"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"cleanmon/alerts"
	"cleanmon/store"
)

// The zone object carries the judge's report: attention and its reasons,
// the clean-up period, trusted locations, the DP sensors (no number while
// silent) and every open alarm, latched ones included.
func TestZoneObjectFromReport(t *testing.T) {
	until := testNow.Add(15 * time.Minute)
	rep := alerts.ZoneReport{
		ZoneView: alerts.ZoneView{ID: "hood", Name: "Hood", OperatingState: alerts.AtRest, LimitsState: alerts.InOperation,
			CleanUpUntil: until, State: alerts.StatusUnknown,
			Locations: []alerts.LocationView{{ID: "h-1", Counter: "pc-hood", Trusted: false, Untrusted: "flow 20 L/min is off nominal", State: alerts.StatusUnknown}}},
		Attention:        alerts.AttentionAction,
		AttentionReasons: []string{"DP dp-hood (hood → corridor) reversed: -3.5 Pa", "counter pc-hood at h-1 untrusted"},
		ActiveAlarms: []alerts.Alarm{
			{ID: "a-1", Zone: "hood", Kind: alerts.KindExcursion, Level: alerts.LevelAction, State: alerts.StateActive, Since: testNow.Add(-time.Hour), Latched: true, ConditionGone: true},
			{ID: "a-2", Zone: "hood", Kind: alerts.KindExcursion, Level: alerts.LevelAction, State: alerts.StateActive, Since: testNow.Add(-time.Minute)},
		},
		Sensors: []alerts.SensorView{
			{SensorDP: alerts.SensorDP{Sensor: "dp-hood", High: "hood", Low: "corridor", MinPa: 10, Pa: -3.5, Time: testNow}, Status: alerts.SensorReversed, DoorOpenings: 4},
			{SensorDP: alerts.SensorDP{Sensor: "dp-hood-2", High: "hood", Low: "corridor", MinPa: 10}, Status: alerts.SensorSilent},
		},
	}
	h := newTestAPI(t, Options{Zones: fakeZones{zone: func(string) (alerts.ZoneReport, bool) { return rep, true }}})
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest("GET", "/api/v1/zones/hood", nil))
	var z struct {
		Attention        string     `json:"attention"`
		AttentionReasons []string   `json:"attention_reasons"`
		CleanUpUntil     *time.Time `json:"clean_up_until"`
		State            string     `json:"state"`
		Locations        []struct {
			Trusted   *bool  `json:"trusted"`
			Untrusted string `json:"untrusted"`
		} `json:"locations"`
		Sensors []struct {
			ID           string   `json:"id"`
			Pa           *float64 `json:"pa"`
			Status       string   `json:"status"`
			DoorOpenings uint64   `json:"door_openings"`
		} `json:"sensors"`
		ActiveAlarms []alerts.Alarm `json:"active_alarms"`
	}
	if err := json.Unmarshal(rec.Body.Bytes(), &z); err != nil || rec.Code != http.StatusOK {
		t.Fatalf("%d %s", rec.Code, rec.Body.String())
	}
	if z.Attention != "action" || len(z.AttentionReasons) != 2 || z.State != "unknown" || z.CleanUpUntil == nil || !z.CleanUpUntil.Equal(until) {
		t.Errorf("zone %+v", z)
	}
	if len(z.Locations) != 1 || z.Locations[0].Trusted == nil || *z.Locations[0].Trusted || z.Locations[0].Untrusted == "" {
		t.Errorf("locations %+v", z.Locations)
	}
	if len(z.Sensors) != 2 || z.Sensors[0].Pa == nil || *z.Sensors[0].Pa != -3.5 || z.Sensors[0].DoorOpenings != 4 || z.Sensors[1].Pa != nil || z.Sensors[1].Status != "silent" {
		t.Errorf("sensors %+v", z.Sensors)
	}
	// Newest first, the latched one kept.
	if len(z.ActiveAlarms) != 2 || z.ActiveAlarms[0].ID != "a-2" || z.ActiveAlarms[1].ID != "a-1" {
		t.Errorf("active alarms %+v", z.ActiveAlarms)
	}
	// With nothing to say, the keys are still there: reasons empty, no
	// clean-up.
	rep = alerts.ZoneReport{ZoneView: alerts.ZoneView{ID: "hood", State: alerts.StatusInClass}, Attention: alerts.AttentionNone}
	rec = httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest("GET", "/api/v1/zones/hood", nil))
	for _, key := range []string{`"attention":"none"`, `"attention_reasons":[]`, `"clean_up_until":null`, `"active_alarms":[]`, `"sensors":[]`} {
		if !strings.Contains(rec.Body.String(), key) {
			t.Errorf("zone without findings lacks %s: %s", key, rec.Body.String())
		}
	}
}

// A classification judges each stored reading by the operating state of
// its time: maintenance and untrusted readings are left out and counted,
// and readings of two limits states are certified apart.
func TestCertifyStoredByStateOfItsTime(t *testing.T) {
	t0 := testNow.Add(-2 * time.Hour)
	// ISO 5 at 0.5 µm: 3 520 /m³ (ISO 14644-1:2015 Table 1); 50 particles
	// in 28.3 L is 1 767 /m³, within it.
	reading := func(i int, status string) store.Reading {
		return store.Reading{Counter: "pc-hood", Time: t0.Add(time.Duration(i) * time.Minute), VolumeL: 28.3, FlowLPM: 28.3, Status: status,
			Sizes: []float64{0.5}, Counts: []uint64{50}}
	}
	rs := []store.Reading{reading(0, ""), reading(1, ""), reading(2, ""), reading(3, ""), reading(4, ""), reading(5, "fault"), reading(6, ""), reading(7, "")}
	class := 5.0
	for _, c := range []struct {
		name     string
		opAt     func(time.Time) alerts.StateAt
		state    string
		warnings []string
	}{
		{"maintenance left out", func(at time.Time) alerts.StateAt {
			if at.Sub(t0) >= 3*time.Minute && at.Sub(t0) < 5*time.Minute {
				return alerts.StateAt{Operating: alerts.Maintenance, Limits: alerts.InOperation}
			}
			return alerts.StateAt{Operating: alerts.InOperation, Limits: alerts.InOperation, Judged: true}
		}, "in-operation", []string{"2 readings taken in maintenance left out", "1 untrusted readings"}},
		{"two states certified apart", func(at time.Time) alerts.StateAt {
			if at.Sub(t0) >= 4*time.Minute {
				return alerts.StateAt{Operating: alerts.AtRest, Limits: alerts.AtRest, Judged: true}
			}
			return alerts.StateAt{Operating: alerts.InOperation, Limits: alerts.InOperation, Judged: true}
		}, "", []string{"certified against that state's limits on their own", "1 untrusted readings"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			s := newTestServer(t, Options{
				Zones: fakeZones{
					zone: func(string) (alerts.ZoneReport, bool) {
						return alerts.ZoneReport{ZoneView: alerts.ZoneView{ID: "hood", Class: &class, LimitsState: alerts.AtRest, Sizes: []float64{0.5}, AreaM2: 2}}, true
					},
					opAt: func(_ string, at time.Time) alerts.StateAt { return c.opAt(at) },
				},
				Store: fakeStore{scanReadings: func(counter string, from, to time.Time, fn func(store.Reading) error) error {
					for _, r := range rs {
						if err := fn(r); err != nil {
							return err
						}
					}
					return nil
				}},
			})
			status, body, rep := s.CertifyStored(context.Background(), "hood", t0.Format(time.RFC3339), testNow.Format(time.RFC3339))
			if status != http.StatusOK || rep == nil {
				t.Fatalf("%d %s", status, body)
			}
			if c.state != "" && rep.State != c.state {
				t.Errorf("state %q, want %q (the state of the readings' time, not the zone's now)", rep.State, c.state)
			}
			all := strings.Join(rep.Warnings, "|")
			for _, w := range c.warnings {
				if !strings.Contains(all, w) {
					t.Errorf("warnings %q lack %q", rep.Warnings, w)
				}
			}
			n := 0
			for _, l := range rep.Locations {
				n += l.Samples
			}
			if want := map[string]int{"maintenance left out": 5}[c.name]; want > 0 && n != want {
				t.Errorf("%d samples certified, want %d", n, want)
			}
		})
	}
}

// Every alarm object has the keys scripts rely on, also where they have no
// value (a DP alarm has no location or size).
func TestAlarmObjectKeys(t *testing.T) {
	al := alerts.Alarm{ID: "dp-hood:pressure-reversal", Zone: "hood", Kind: alerts.KindPressureReversal, Level: alerts.LevelAction,
		State: alerts.StateActive, Sensor: "dp-hood", Since: testNow, Peak: -3.5, PeakTime: testNow, Unit: "Pa"}
	b, err := json.Marshal(al)
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	json.Unmarshal(b, &m)
	for _, k := range []string{"id", "zone", "kind", "level", "state", "location", "size_um", "since", "peak", "peak_time", "acknowledged_by", "comment"} {
		if _, ok := m[k]; !ok {
			t.Errorf("alarm object lacks %q: %s", k, b)
		}
	}
}
