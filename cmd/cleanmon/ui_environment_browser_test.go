package main

import (
	"context"
	"fmt"
	"net/http"
	"testing"
	"time"
)

// TestPagesShowEnvironment opens the demo's assembly hall and overview in
// a real browser: the zone page lists th-asm's temperature and humidity,
// the overview every environment sensor of the site (av-hood, th-asm,
// th-met: four quantities); a temperature posted outside the action band
// shows as such within a poll, and the demo's day holds an environment
// alarm.
func TestPagesShowEnvironment(t *testing.T) {
	b := newBrowser(t)
	d := startDaemon(t, "--demo", "--data", t.TempDir())
	waitUntil(t, "the demo's environment samples", 90*time.Second, func() bool {
		var env []struct {
			Time *string `json:"time"`
		}
		getJSON(t, d, "/api/v1/environment", &env)
		return len(env) == 3 && env[0].Time != nil && env[1].Time != nil && env[2].Time != nil
	})

	// The demo's simulated day crosses a band for longer than its delay.
	waitUntil(t, "an environment alarm of the demo", 90*time.Second, func() bool {
		var alarms []struct {
			Kind   string `json:"kind"`
			Sensor string `json:"sensor"`
		}
		getJSON(t, d, "/api/v1/alarms?state=all", &alarms)
		for _, a := range alarms {
			if a.Kind == "environment" && (a.Sensor == "av-hood" || a.Sensor == "th-asm" || a.Sensor == "th-met") {
				return true
			}
		}
		return false
	})

	b.open(d.url+"/", "")
	b.waitJS(30*time.Second, "the overview's environment table", `document.querySelectorAll("#env-table tr[data-sensor]").length === 4`)
	var sensors []string
	b.eval(`[...new Set([...document.querySelectorAll("#env-table tr[data-sensor]")].map(r => r.dataset.sensor))].sort()`, &sensors)
	if fmt.Sprint(sensors) != "[av-hood th-asm th-met]" {
		t.Errorf("overview lists %v", sensors)
	}

	at := time.Now().UTC().Add(time.Second).Format(time.RFC3339)
	body := fmt.Sprintf(`{"sensor":"th-asm","time":%q,"temperature_c":23.5,"humidity_pct":45}`, at)
	if code, out, err := apiDo(context.Background(), http.MethodPost, d.url+"/api/v1/environment", []byte(body), "application/json"); err != nil || code != 200 {
		t.Fatalf("posting a sample: %d %v %s", code, err, out)
	}
	b.open(d.url+"/zones/assembly", "")
	b.waitJS(40*time.Second, "th-asm's temperature outside the action band on the zone page",
		`(() => { const r = document.querySelector('#env-table tr[data-sensor="th-asm"][data-channel="temperature_c"]'); return r && r.dataset.state === "action" && r.textContent.includes("23.5"); })()`)
	var rows int
	b.eval(`document.querySelectorAll("#env-table tr[data-sensor]").length`, &rows)
	if rows != 2 {
		t.Errorf("the assembly hall shows %d environment rows, want th-asm's temperature and humidity", rows)
	}
	b.screenshot("zone-environment")
	b.checkConsole()
}
