package main

import (
	"cleanmon/alerts/investigate"
	"cleanmon/cmd/cleanmon/internal/daemon"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// The scenarios of the judge, each through the real daemon binary: HTTP in,
// judged zone state, alarms and metrics out. Every condition is polled with
// a bound, as the judge takes committed batches from a queue.

// judgeSite is a small site of the invented company: an ISO 7 assembly
// hall with one counter (stated maximum 1e6 /m³) and a DP sensor to the
// corridor, and a grade B fill room whose limits depend on its operating
// state. notifications is appended as it is (a YAML section or "").
func judgeSite(t *testing.T, notifications string) string {
	t.Helper()
	sum := sha256.Sum256([]byte(crashToken))
	cfg := fmt.Sprintf(`site: "Veldmark Photonics, building C"
retention: "87600h"
access:
  rate_limit: {disabled: true}
  tokens:
    - {name: judge-admin, sha256: %q, role: admin}
zones:
  - id: assembly
    name: Assembly hall
    class: 7
    operating_state: in-operation
    area_m2: 2
    sizes: ["0.5", "5"]
    levels:
      "0.5": {alert: 180000, action: 280000}
    locations: [{id: asm-1}]
  - id: fill
    name: Sterile fill
    grade: B
    operating_state: in-operation
    area_m2: 2
    sizes: ["0.5", "5"]
    locations: [{id: fill-1}]
  - id: corridor
    name: Corridor
counters:
  - {id: pc-asm-1, zone: assembly, location: asm-1, flow_lpm: 28.3, max_per_m3: 1000000, sizes: ["0.5", "5"], interval: "1m"}
  - {id: pc-fill, zone: fill, location: fill-1, flow_lpm: 28.3, sizes: ["0.5", "5"], interval: "1m"}
pressure_sensors:
  - {id: dp-asm, high: assembly, low: corridor, min_pa: 8, delay: "30s", interval: "10s"}
%s`, hex.EncodeToString(sum[:]), notifications)
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(cfg), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

type judgedAlarm struct {
	ID            string    `json:"id"`
	Zone          string    `json:"zone"`
	Kind          string    `json:"kind"`
	Level         string    `json:"level"`
	State         string    `json:"state"`
	Location      string    `json:"location"`
	Sensor        string    `json:"sensor"`
	SizeUM        *float64  `json:"size_um"`
	Since         time.Time `json:"since"`
	Peak          float64   `json:"peak"`
	PeakTime      time.Time `json:"peak_time"`
	ConditionGone bool      `json:"condition_gone"`
}

type judgedZone struct {
	ID               string     `json:"id"`
	State            string     `json:"state"`
	OperatingState   string     `json:"operating_state"`
	Attention        string     `json:"attention"`
	AttentionReasons []string   `json:"attention_reasons"`
	CleanUpUntil     *time.Time `json:"clean_up_until"`
	Locations        []struct {
		ID      string `json:"id"`
		Trusted bool   `json:"trusted"`
		State   string `json:"state"`
	} `json:"locations"`
	ActiveAlarms []judgedAlarm `json:"active_alarms"`
	Sensors      []struct {
		ID           string `json:"id"`
		Status       string `json:"status"`
		DoorOpenings uint64 `json:"door_openings"`
	} `json:"sensors"`
}

// judged is one daemon of judgeSite.
type judged struct {
	t *testing.T
	d *process
}

func startJudged(t *testing.T, notifications, data string) judged {
	t.Helper()
	return judged{t, startDaemon(t, "--config", judgeSite(t, notifications), "--data", data)}
}

func (j judged) post(path, body string) {
	j.t.Helper()
	code, b, err := apiDo(context.Background(), http.MethodPost, j.d.url+path, []byte(body), "application/json")
	if err != nil || code != http.StatusOK {
		j.t.Fatalf("POST %s: %d %v %s", path, code, err, b)
	}
}

func (j judged) zone(id string) judgedZone {
	j.t.Helper()
	var z judgedZone
	getJSON(j.t, j.d, "/api/v1/zones/"+id, &z)
	return z
}

func (j judged) alarms(state string) []judgedAlarm {
	j.t.Helper()
	var as []judgedAlarm
	getJSON(j.t, j.d, "/api/v1/alarms?state="+state, &as)
	return as
}

// asmReading is a reading of pc-asm-1: c05 particles ≥0.5 µm in 28.3 L,
// that is c05 / 0.0283 per m³.
func asmReading(at time.Time, c05 int) string {
	return fmt.Sprintf(`{"counter":"pc-asm-1","time":%q,"volume_l":28.3,"counts":{"0.5":%d,"5":0},"flow_lpm":28.3,"status":"ok"}`, at.UTC().Format(time.RFC3339), c05)
}

func fillReading(at time.Time, c05 int) string {
	return fmt.Sprintf(`{"counter":"pc-fill","time":%q,"volume_l":28.3,"counts":{"0.5":%d,"5":0},"flow_lpm":28.3,"status":"ok"}`, at.UTC().Format(time.RFC3339), c05)
}

func dpSample(at time.Time, pa float64) string {
	return fmt.Sprintf(`{"sensor":"dp-asm","time":%q,"pa":%g}`, at.UTC().Format(time.RFC3339), pa)
}

func jsonArray(items ...string) string { return "[" + strings.Join(items, ",") + "]" }

// perM3 is the concentration of n particles in 28.3 L.
func perM3(n int) float64 { return float64(n) * 1000 / 28.3 }

const judgeBound = 20 * time.Second

func TestJudgeScenarios(t *testing.T) {
	// A DP below zero is a flow reversal: the zone needs a person at once,
	// whatever its particles say.
	t.Run("reversal turns attention", func(t *testing.T) {
		j := startJudged(t, "", t.TempDir())
		now := time.Now().UTC().Truncate(time.Second)
		j.post("/api/v1/readings", asmReading(now.Add(-time.Minute), 2000))
		j.post("/api/v1/pressure", dpSample(now.Add(-time.Second), 12.4))
		waitFor(t, judgeBound, "attention none with clean air and a sound cascade", func() bool {
			z := j.zone("assembly")
			return z.State == "in-class" && z.Attention == "none" && len(z.AttentionReasons) == 0
		})
		j.post("/api/v1/pressure", dpSample(now, -3.5))
		var z judgedZone
		waitFor(t, judgeBound, "the reversal to reach the zone", func() bool {
			z = j.zone("assembly")
			return z.Attention != "none"
		})
		// The particle state alone stays in class: attention is what
		// tells the person.
		if z.State != "in-class" || z.Attention != "action" || !strings.Contains(strings.Join(z.AttentionReasons, "|"), "reversed") {
			t.Errorf("zone %+v, want state in-class, attention action with the reversal among its reasons", z)
		}
		if len(z.Sensors) != 1 || z.Sensors[0].Status != "reversed" {
			t.Errorf("sensors %+v", z.Sensors)
		}
	})

	// A door opened and shut: the DP dips below its minimum for 20 s,
	// shorter than its 30 s delay. No alarm record, one door opening.
	t.Run("door dip leaves no record", func(t *testing.T) {
		j := startJudged(t, "", t.TempDir())
		t0 := time.Now().UTC().Truncate(time.Second).Add(-time.Minute)
		j.post("/api/v1/pressure", jsonArray(dpSample(t0, 12.1), dpSample(t0.Add(10*time.Second), 3.2),
			dpSample(t0.Add(20*time.Second), 2.9), dpSample(t0.Add(30*time.Second), 12.4)))
		waitFor(t, judgeBound, "the door opening to be counted", func() bool {
			z := j.zone("assembly")
			return len(z.Sensors) == 1 && z.Sensors[0].DoorOpenings == 1
		})
		if v := metricValue(metricsText(t, j.d), `cleanmon_door_openings_total{sensor="dp-asm"}`); v != 1 {
			t.Errorf("cleanmon_door_openings_total %v, want 1", v)
		}
		for _, a := range j.alarms("all") {
			if a.Sensor == "dp-asm" {
				t.Errorf("alarm record for a door opening: %+v", a)
			}
		}
	})

	// Two excursions of one location, the first never acknowledged: two
	// alarms, each with its own peak. An action alarm is acknowledged only
	// with a comment.
	t.Run("two excursions are two alarms", func(t *testing.T) {
		j := startJudged(t, "", t.TempDir())
		b := time.Now().UTC().Truncate(time.Second).Add(-8 * time.Minute)
		j.post("/api/v1/readings", jsonArray(asmReading(b, 2000), asmReading(b.Add(time.Minute), 9000), asmReading(b.Add(2*time.Minute), 9600),
			asmReading(b.Add(3*time.Minute), 2000), asmReading(b.Add(4*time.Minute), 9300), asmReading(b.Add(5*time.Minute), 2000)))
		var exc []judgedAlarm
		waitFor(t, judgeBound, "two excursion alarms", func() bool {
			exc = exc[:0]
			for _, a := range j.alarms("active") {
				if a.Kind == "excursion" && a.Location == "asm-1" {
					exc = append(exc, a)
				}
			}
			return len(exc) == 2
		})
		if exc[0].ID == exc[1].ID {
			t.Fatalf("one id for two excursions: %+v", exc)
		}
		first, second := exc[0], exc[1]
		if second.Since.Before(first.Since) {
			first, second = second, first
		}
		// 9 600 in 28.3 L ≈ 339 223 /m³, the worst of the first episode;
		// 9 300 ≈ 328 622 /m³ the only one of the second.
		if math.Abs(first.Peak-perM3(9600)) > 1 || !first.PeakTime.Equal(b.Add(2*time.Minute)) || first.Level != "action" || !first.ConditionGone {
			t.Errorf("first excursion %+v, want peak %.0f at %s, condition gone", first, perM3(9600), b.Add(2*time.Minute))
		}
		if math.Abs(second.Peak-perM3(9300)) > 1 || !second.PeakTime.Equal(b.Add(4*time.Minute)) {
			t.Errorf("second excursion %+v, want peak %.0f at %s", second, perM3(9300), b.Add(4*time.Minute))
		}
		z := j.zone("assembly")
		if len(z.ActiveAlarms) < 2 || z.Attention == "none" {
			t.Errorf("zone lists %d open alarms, attention %s; want both latched ones and not none", len(z.ActiveAlarms), z.Attention)
		}
		code, body, _ := apiDo(context.Background(), http.MethodPost, j.d.url+"/api/v1/alarms/"+first.ID+"/ack", []byte(`{"by":"r. ilves"}`), "application/json")
		var e struct{ Field string }
		json.Unmarshal(body, &e)
		if code != http.StatusBadRequest || e.Field != "comment" {
			t.Errorf("ack of an action alarm without a comment: %d %s, want 400 naming comment", code, body)
		}
	})

	// A reading that arrives after newer ones (a counter clock running
	// fast, a gateway's buffer) is judged all the same.
	t.Run("late action-level reading raises its alarm", func(t *testing.T) {
		j := startJudged(t, "", t.TempDir())
		b := time.Now().UTC().Truncate(time.Second).Add(-4 * time.Minute)
		j.post("/api/v1/readings", jsonArray(asmReading(b.Add(time.Minute), 2000), asmReading(b.Add(2*time.Minute), 2100), asmReading(b.Add(3*time.Minute), 1900)))
		waitFor(t, judgeBound, "the clean readings to be judged", func() bool { return j.zone("assembly").State == "in-class" })
		j.post("/api/v1/readings", asmReading(b, 9000))
		waitFor(t, judgeBound, "the late excursion's alarm", func() bool {
			for _, a := range j.alarms("active") {
				if a.Kind == "excursion" && a.Level == "action" && a.Since.Equal(b) && math.Abs(a.Peak-perM3(9000)) < 1 {
					return true
				}
			}
			return false
		})
	})

	// At the end of a shift the fill room goes to at-rest: for its
	// clean-up period it is judged against the in-operation limits it ran
	// under, so the air of the shift raises nothing; and a classification
	// of the shift uses the state the readings were taken in.
	t.Run("at-rest clean-up and classification by the state of its time", func(t *testing.T) {
		j := startJudged(t, "", t.TempDir())
		now := time.Now().UTC().Truncate(time.Second)
		// 1 415 particles ≥0.5 µm in 28.3 L = 50 000 /m³: well within
		// grade B in operation (352 000), far above grade B at rest
		// (3 520; EU GMP Annex 1 (2022) Table 1 and Table 5).
		var rs []string
		for i := 30; i >= 1; i-- {
			rs = append(rs, fillReading(now.Add(-time.Duration(i)*time.Minute), 1415))
		}
		j.post("/api/v1/readings", jsonArray(rs...))
		waitFor(t, judgeBound, "the shift's readings to be judged", func() bool { return j.zone("fill").State == "in-class" })
		code, body, err := apiDo(context.Background(), http.MethodPut, j.d.url+"/api/v1/zones/fill/state", []byte(`{"state":"at-rest","reason":"end of shift"}`), "application/json")
		if err != nil || code != http.StatusOK {
			t.Fatalf("PUT state: %d %v %s", code, err, body)
		}
		var put judgedZone
		json.Unmarshal(body, &put)
		// The default clean-up period is 20 min.
		if put.OperatingState != "at-rest" || put.CleanUpUntil == nil || put.CleanUpUntil.Sub(now) < 19*time.Minute || put.CleanUpUntil.Sub(now) > 22*time.Minute {
			t.Errorf("after the switch: %+v, want at-rest with clean_up_until about 20 min ahead", put)
		}
		j.post("/api/v1/readings", fillReading(time.Now().UTC().Truncate(time.Second), 1415))
		time.Sleep(2 * time.Second) // the tick of the time-driven rules
		z := j.zone("fill")
		if z.State != "in-class" || z.Attention != "none" || z.CleanUpUntil == nil {
			t.Errorf("during clean-up: state %s attention %s %v clean_up_until %v, want in-class, none", z.State, z.Attention, z.AttentionReasons, z.CleanUpUntil)
		}
		for _, a := range j.alarms("all") {
			if a.Zone == "fill" {
				t.Errorf("alarm during clean-up: %+v", a)
			}
		}
		var rep struct {
			Verdict  string   `json:"verdict"`
			State    string   `json:"state"`
			Problems []string `json:"problems"`
		}
		getJSON(t, j.d, "/api/v1/zones/fill/classification?from="+now.Add(-31*time.Minute).Format(time.RFC3339)+"&to="+now.Format(time.RFC3339), &rep)
		if rep.Verdict != "pass" || rep.State != "in-operation" {
			t.Errorf("classification of the shift: %+v, want pass against the in-operation limits of its time", rep)
		}
	})

	// A refused request is counted against its counter, and every result
	// of every configured counter is there from the start.
	t.Run("rejected readings are counted", func(t *testing.T) {
		j := startJudged(t, "", t.TempDir())
		m := metricsText(t, j.d)
		for _, c := range []string{"pc-asm-1", "pc-fill"} {
			for _, r := range []string{"accepted", "duplicate", "conflict", "rejected"} {
				if v := metricValue(m, `cleanmon_readings_total{counter="`+c+`",result="`+r+`"}`); v != 0 {
					t.Errorf("cleanmon_readings_total %s %s at start: %v, want 0", c, r, v)
				}
			}
		}
		bad := fmt.Sprintf(`{"counter":"pc-asm-1","time":%q,"volume_l":-1,"counts":{"0.5":10,"5":0}}`, time.Now().UTC().Format(time.RFC3339))
		code, body, _ := apiDo(context.Background(), http.MethodPost, j.d.url+"/api/v1/readings", []byte(bad), "application/json")
		if code != http.StatusBadRequest {
			t.Fatalf("bad reading: %d %s", code, body)
		}
		if v := metricValue(metricsText(t, j.d), `cleanmon_readings_total{counter="pc-asm-1",result="rejected"}`); v != 1 {
			t.Errorf("rejected readings of pc-asm-1: %v, want 1", v)
		}
	})

	// A reading at or beyond the counter's stated maximum is kept but not
	// trusted: its location is unknown until a trusted reading follows.
	t.Run("over-range reading makes its location unknown", func(t *testing.T) {
		j := startJudged(t, "", t.TempDir())
		now := time.Now().UTC().Truncate(time.Second)
		j.post("/api/v1/readings", jsonArray(asmReading(now.Add(-2*time.Minute), 2000), asmReading(now.Add(-time.Minute), 2100)))
		waitFor(t, judgeBound, "the trusted readings", func() bool {
			z := j.zone("assembly")
			return len(z.Locations) == 1 && z.Locations[0].Trusted && z.Locations[0].State == "in-class"
		})
		// 33 960 in 28.3 L = 1.2e6 /m³, beyond the stated 1e6.
		j.post("/api/v1/readings", asmReading(now, 33960))
		var z judgedZone
		waitFor(t, judgeBound, "the location to turn unknown", func() bool {
			z = j.zone("assembly")
			return len(z.Locations) == 1 && !z.Locations[0].Trusted
		})
		if z.Locations[0].State != "unknown" || z.State != "unknown" || z.Attention == "none" {
			t.Errorf("after an over-range reading: %+v", z)
		}
	})
}

// TestDemoFirstDayIsQuiet runs the demo as a user first meets it (`serve
// --demo` backfills the last 24 h of the invented site) and checks that
// its normal day reads as one: the door openings of the simulator are
// counted, never alarm records; the trend rule raises fewer than 10
// alarms; and no zone with an open alarm shows attention none.
func TestDemoFirstDayIsQuiet(t *testing.T) {
	d := startDaemon(t, "--demo", "--data", t.TempDir())
	waitFor(t, 120*time.Second, "the demo backfill", func() bool { return strings.Contains(d.logs.String(), "demo backfill done") })
	waitFor(t, 60*time.Second, "the judge to take the backfill", func() bool {
		return metricValue(metricsText(t, d), "cleanmon_rules_queue") == 0
	})
	metrics := metricsText(t, d)
	var all []judgedAlarm
	getJSON(t, d, "/api/v1/alarms?state=all&since="+time.Now().UTC().Add(-26*time.Hour).Format(time.RFC3339), &all)
	// The demo stages incidents of known cause every two hours (a door
	// held open for minutes, a fan failure among them): a DP alarm must be
	// one of those, never one of the simulator's door openings, each
	// shorter than its sensor's delay.
	incidents := daemon.DemoIncidents(time.Now().Add(-27*time.Hour), time.Now().Add(time.Hour))
	staged := func(at time.Time) bool {
		for _, inc := range incidents {
			if (inc.Cause == investigate.CauseDoorHeldOpen || inc.Cause == investigate.CauseFanFailure) && !at.Before(inc.From) && at.Before(inc.To) {
				return true
			}
		}
		return false
	}
	trend, dp := 0, 0
	for _, a := range all {
		switch a.Kind {
		case "pressure-low":
			dp++
			if !staged(a.Since) {
				t.Errorf("alarm record of a DP dip that no staged incident explains (a door opening?): %+v", a)
			}
		case "trend":
			trend++
		}
	}
	if trend >= 10 {
		t.Errorf("%d trend alarms in the demo's first day, want fewer than 10", trend)
	}
	// The simulator opens a door every 2 to 6 minutes at each DP sensor:
	// the day has hundreds, counted.
	doors := 0.0
	for _, s := range []string{"dp-hood", "dp-asm", "dp-met", "dp-gown"} {
		if v := metricValue(metrics, `cleanmon_door_openings_total{sensor="`+s+`"}`); v > 0 {
			doors += v
		}
	}
	if doors < 100 {
		t.Errorf("%v door openings counted in a day, want the simulator's hundreds", doors)
	}
	// The demo runs live meanwhile: the page and the metrics are read
	// until they agree (a reading may land between the two reads).
	var zones []judgedZone
	waitFor(t, 30*time.Second, "the zones and their attention metric to agree", func() bool {
		getJSON(t, d, "/api/v1/zones", &zones)
		m := metricsText(t, d)
		for _, z := range zones {
			if metricValue(m, `cleanmon_zone_attention{level="`+z.Attention+`",zone="`+z.ID+`"}`) != 1 {
				return false
			}
		}
		return true
	})
	// A zone's open alarms are in its own object, read at one instant.
	for _, z := range zones {
		if len(z.ActiveAlarms) > 0 && z.Attention == "none" {
			t.Errorf("zone %s has open alarms and attention none: %+v", z.ID, z)
		}
	}
	t.Logf("demo day: %d alarm records, %d trend, %d DP alarms of %d staged incidents, %.0f door openings", len(all), trend, dp, len(incidents), doors)
}
