package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	cdpbrowser "github.com/chromedp/cdproto/browser"
	"github.com/chromedp/chromedp"
)

// uiZone is the part of the zone object the page tests compare.
type uiZone struct {
	ID, Name, State string
	Class           *float64
	Limits          map[string]*float64 `json:"limits_per_m3"`
	Locations       []struct{ ID string }
}

type uiSensor struct {
	ID, High, Low, State string
	MinPa                float64 `json:"min_pa"`
}

func uiGet(t *testing.T, url, token string, v any) {
	t.Helper()
	code, b := call(t, "GET", url, token, "")
	if code != http.StatusOK {
		t.Fatalf("GET %s: %d %s", url, code, b)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("GET %s: %v in %s", url, err, b)
	}
}

// TestPagesOnDemoSite drives the real binary's demo (`serve --demo`, open
// API on loopback) in Chromium: the overview lists the demo zones on the
// pressure cascade with their DP sensors, shows each zone's state as the
// API does, and changes a zone's shown state within seconds of an
// excursion posted through the API; the zone page draws a chart per size
// with a line per location. Screenshots of both are saved.
func TestPagesOnDemoSite(t *testing.T) {
	b := newBrowser(t)
	d := startDaemon(t, "--demo", "--data", t.TempDir())

	// The demo backfills a day before its zones are fresh.
	var zones []uiZone
	waitFor(t, 90*time.Second, "the demo backfill", func() bool {
		uiGet(t, d.url+"/api/v1/zones", "", &zones)
		for _, z := range zones {
			if z.Class != nil && z.State == "unknown" {
				return false
			}
		}
		return len(zones) > 0
	})

	b.open(d.url+"/", `document.body.dataset.ready === "yes"`)

	// Every zone of the demo site and of the API is on the page.
	var shown []struct{ ID, Text, State string }
	b.eval(`[...document.querySelectorAll(".zone-card[data-zone]")].map(n => ({id: n.dataset.zone, text: n.innerText, state: n.dataset.state}))`, &shown)
	ids := map[string]string{}
	for _, s := range shown {
		ids[s.ID] = s.Text
	}
	for _, want := range []string{"coating-hood", "assembly", "metrology", "gowning", "corridor"} { // the demo site
		if _, ok := ids[want]; !ok {
			t.Errorf("overview lacks demo zone %s; shows %v", want, shown)
		}
	}
	for _, z := range zones {
		if !strings.Contains(ids[z.ID], z.Name) {
			t.Errorf("zone %s: card %q lacks its name %q", z.ID, ids[z.ID], z.Name)
		}
	}

	// The cascade: each sensor's high side is drawn above its low side,
	// and the sensor shows its minimum.
	var sensors []uiSensor
	uiGet(t, d.url+"/api/v1/sensors", "", &sensors)
	if len(sensors) != 4 { // the demo site: four "pressure to" entries
		t.Fatalf("demo has %d DP sensors, want 4", len(sensors))
	}
	var tops map[string]float64
	b.eval(`Object.fromEntries([...document.querySelectorAll(".zone-card[data-zone]")].map(n => [n.dataset.zone, n.getBoundingClientRect().top]))`, &tops)
	var chips map[string]string
	b.eval(`Object.fromEntries([...document.querySelectorAll(".dp-chip")].map(n => [n.dataset.sensor, n.innerText]))`, &chips)
	for _, s := range sensors {
		if !(tops[s.High] < tops[s.Low]) {
			t.Errorf("sensor %s: high side %s (top %.0f) not above low side %s (top %.0f)", s.ID, s.High, tops[s.High], s.Low, tops[s.Low])
		}
		chip, ok := chips[s.ID]
		if !ok {
			t.Errorf("sensor %s not on the overview", s.ID)
			continue
		}
		if want := fmt.Sprintf("min %.1f Pa", s.MinPa); !strings.Contains(chip, want) || !strings.Contains(chip, " Pa") {
			t.Errorf("sensor %s chip %q lacks %q", s.ID, chip, want)
		}
	}

	// Each zone shows the state the API gives (polled: both move).
	for _, z := range zones {
		b.waitJS(10*time.Second, "zone "+z.ID+" to show the API's state",
			fmt.Sprintf(`(async () => { const z = await (await fetch("/api/v1/zones/%s")).json(); const n = document.querySelector('.zone-card[data-zone="%s"]'); return n && n.dataset.state === z.state; })()`, z.ID, z.ID))
	}
	b.screenshot("overview")

	// On a tablet held upright the overview fits the width: no sideways
	// scrolling, the sign-in box and every zone still there.
	b.do(10*time.Second, "emulating a tablet", chromedp.EmulateViewport(820, 1180, chromedp.EmulateTouch))
	b.open(d.url+"/", `document.body.dataset.ready === "yes"`)
	var tablet struct {
		Overflow bool
		Cards    int
		SignIn   bool
	}
	b.eval(`({overflow: document.documentElement.scrollWidth > window.innerWidth, cards: document.querySelectorAll(".zone-card[data-zone]").length,
		signIn: document.getElementById("who").getBoundingClientRect().right <= window.innerWidth})`, &tablet)
	if tablet.Overflow || tablet.Cards != len(zones) || !tablet.SignIn {
		t.Errorf("on a tablet: %+v, want no overflow and %d zones", tablet, len(zones))
	}
	b.screenshot("overview-tablet")
	b.do(10*time.Second, "leaving the tablet", chromedp.ResetViewport())
	b.open(d.url+"/", `document.body.dataset.ready === "yes"`)

	// An excursion posted through the API shows within seconds, without a
	// reload: 200 000 particles ≥0.5 µm in 28.3 L is 7.1 million /m³,
	// far above ISO 5's 3 520 /m³ (ISO 14644-1:2015 Table 1), so even
	// one such sample lifts the 10-minute mean above the limit.
	target := ""
	for _, id := range []string{"coating-hood", "metrology", "gowning"} {
		for _, s := range shown {
			if s.ID == id && s.State != "out-of-class" {
				target = id
			}
		}
		if target != "" {
			break
		}
	}
	if target == "" {
		t.Fatalf("every candidate zone is already out of class: %v", shown)
	}
	counter := map[string]string{"coating-hood": "pc-hood", "metrology": "pc-met", "gowning": "pc-gown"}[target]
	b.eval(`window.__mark = document.getElementById("live").dataset.updated; 1`, new(int))
	at := time.Now().UTC()
	body := fmt.Sprintf(`{"counter":%q,"time":%q,"volume_l":28.3,"counts":{"0.3":400000,"0.5":200000,"1":90000,"5":4000},"flow_lpm":28.3,"status":"ok"}`,
		counter, at.Format(time.RFC3339Nano))
	if code, resp := call(t, "POST", d.url+"/api/v1/readings", "", body); code != 200 {
		t.Fatalf("posting the excursion: %d %s", code, resp)
	}
	b.waitJS(10*time.Second, target+" to show OUT OF CLASS",
		fmt.Sprintf(`(() => { const n = document.querySelector('.zone-card[data-zone="%s"]'); return n && n.dataset.state === "out-of-class" && n.innerText.includes("OUT OF CLASS"); })()`, target))
	t.Logf("%s shown out of class %s after the excursion was posted", target, time.Since(at).Round(10*time.Millisecond))
	var reloaded bool
	b.eval(`window.__mark === undefined`, &reloaded)
	if reloaded {
		t.Error("the page reloaded to show the change")
	}

	// The zone page: a chart per zone size, a line per location, the
	// class limit drawn.
	var asm uiZone
	uiGet(t, d.url+"/api/v1/zones/assembly", "", &asm)
	b.open(d.url+"/zones/assembly?range=24h", `document.body.dataset.chartsReady === "yes"`)
	var charts []struct {
		Series, Limits int
		Title          string
	}
	b.eval(`[...document.querySelectorAll("#charts svg.chart")].map(s => ({series: s.querySelectorAll("path.series").length, limits: s.querySelectorAll("line.th-limit").length, title: s.querySelector(".ct").textContent}))`, &charts)
	if len(charts) != len(asm.Limits) {
		t.Errorf("zone page draws %d concentration charts, want one per size (%d): %+v", len(charts), len(asm.Limits), charts)
	}
	for _, c := range charts {
		if c.Series != len(asm.Locations) || c.Limits != 1 {
			t.Errorf("chart %q: %d series, %d limit lines; want %d and 1", c.Title, c.Series, c.Limits, len(asm.Locations))
		}
	}
	b.waitJS(10*time.Second, "the DP charts", `document.querySelectorAll("#dp-charts svg.chart").length > 0`)
	b.screenshot("zone-assembly")
	cet, err := time.LoadLocation("CET") // the demo site's time_zone
	if err != nil {
		t.Fatal(err)
	}
	uiTimesOnSiteClock(t, b, "zone page", cet)

	// The excursion raised an action alarm; while it is open the zone's
	// headline is not clear, on any screen.
	waitFor(t, 20*time.Second, "the action alarm of "+target, func() bool {
		var as []uiAlarm
		uiGet(t, d.url+"/api/v1/alarms", "", &as)
		for _, a := range as {
			if a.Zone == target && a.Level == "action" && a.State == "active" {
				return true
			}
		}
		return false
	})
	uiWallScreen(t, b, d.url, zones)
	b.waitJS(10*time.Second, "the open alarm on "+target+"'s card", fmt.Sprintf(`!!document.querySelector('.zone-card[data-zone=%q] .zc-alarm')`, target))
	uiHeadlineNotClear(t, b, target)
	uiClearRule(t, b)
	uiSmallScreen(t, b, d.url, "assembly")
	uiTimesOnSiteClock(t, b, "alarms page", cet)
	b.checkConsole()
}

// Tokens of the page test site; its configuration holds their hashes.
const (
	uiOperator = "ui-operator-secret-7f3a"
	uiViewer   = "ui-viewer-secret-51c2"
	uiIngest   = "ui-ingest-secret-0d9e"
)

// uiTokenSite is a cut-down site of the demo site with tokens and no open
// reads: a coating hood of 3 m² with two locations (ISO 14644-1:2015
// Table A.1: 2–4 m² needs 2), the assembly hall with alert and action
// levels, and the metrology room for a year of hourly readings.
func uiTokenSite(t *testing.T) string {
	t.Helper()
	cfg := fmt.Sprintf(`site: "Veldmark Photonics, building C (page tests)"
retention: "87600h"
time_zone: "Etc/GMT-3"
shifts: ["07:00", "19:00"]
access:
  tokens:
    - {name: shift-lead, sha256: %q, role: operator}
    - {name: wall-screen, sha256: %q, role: viewer}
    - {name: gateway, sha256: %q, role: ingest}
zones:
  - id: coating-hood
    name: Coating hood
    class: 5
    operating_state: in-operation
    area_m2: 3
    sizes: ["0.5", "1"]
    locations: [{id: hood-1}, {id: hood-2}]
  - id: assembly
    name: Assembly hall
    class: 7
    operating_state: in-operation
    area_m2: 60
    sizes: ["0.5", "5"]
    levels:
      "0.5": {alert: 180000, action: 280000}
    locations: [{id: asm-1}]
  - id: metrology
    name: Metrology room
    class: 6
    operating_state: in-operation
    area_m2: 20
    sizes: ["0.5", "1"]
    locations: [{id: met-1}]
  - id: corridor
    name: Corridor
counters:
  - {id: pc-hood-1, zone: coating-hood, location: hood-1, flow_lpm: 28.3, sizes: ["0.5", "1"], interval: "1m"}
  - {id: pc-hood-2, zone: coating-hood, location: hood-2, flow_lpm: 28.3, sizes: ["0.5", "1"], interval: "1m"}
  - {id: pc-asm-1, zone: assembly, location: asm-1, flow_lpm: 28.3, sizes: ["0.5", "5"], interval: "1m"}
  - {id: pc-met, zone: metrology, location: met-1, flow_lpm: 28.3, sizes: ["0.5", "1"], interval: "1h"}
pressure_sensors:
  - {id: dp-asm, high: assembly, low: corridor, min_pa: 8, delay: "30s", interval: "10s"}
`, tokenHash(uiOperator), tokenHash(uiViewer), tokenHash(uiIngest))
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(cfg), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

// uiReading is one posted reading (cumulative counts).
type uiReading struct {
	counter, location string
	at                time.Time
	counts            map[string]uint64
}

func (r uiReading) json() string {
	c, _ := json.Marshal(r.counts)
	return fmt.Sprintf(`{"counter":%q,"time":%q,"volume_l":28.3,"counts":%s,"flow_lpm":28.3,"status":"ok"}`, r.counter, r.at.Format(time.RFC3339), c)
}

func uiPost(t *testing.T, url string, rs []uiReading) {
	t.Helper()
	for len(rs) > 0 {
		n := min(len(rs), 2000)
		var b strings.Builder
		for _, r := range rs[:n] {
			b.WriteString(r.json() + "\n")
		}
		req, _ := http.NewRequest("POST", url+"/api/v1/readings", strings.NewReader(b.String()))
		req.Header.Set("Authorization", "Bearer "+uiIngest)
		req.Header.Set("Content-Type", "application/x-ndjson")
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		var out bytes.Buffer
		out.ReadFrom(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != 200 {
			t.Fatalf("posting readings: %d %s", resp.StatusCode, out.String())
		}
		rs = rs[n:]
	}
}

// signIn uses the page's sign-in box and waits for it to name the token.
func (b *browser) signIn(secret, shows string) {
	b.t.Helper()
	b.do(10*time.Second, "signing in", chromedp.SendKeys(chromedp.ID("token"), secret), chromedp.Click(chromedp.ID("signin-btn")))
	b.waitJS(10*time.Second, "the sign-in box to show "+shows, fmt.Sprintf(`document.getElementById("who").textContent.includes(%q)`, shows))
	var leaked bool
	b.eval(fmt.Sprintf(`document.documentElement.outerHTML.includes(%q) || document.getElementById("token").value !== ""`, secret), &leaked)
	if leaked {
		b.t.Error("the token shows in the page after signing in")
	}
}

func (b *browser) signOut() {
	b.t.Helper()
	b.do(10*time.Second, "signing out", chromedp.Click(chromedp.ID("signout-btn")))
	b.waitJS(10*time.Second, "the sign-in box to show no token", `document.getElementById("who").textContent.startsWith("Not signed in")`)
}

type uiAlarm struct {
	ID, Zone, Kind, State, Level string
	AcknowledgedBy               string `json:"acknowledged_by"`
	Comment                      string
}

func uiAlarmByID(t *testing.T, url, id string) uiAlarm {
	t.Helper()
	var as []uiAlarm
	uiGet(t, url+"/api/v1/alarms?state=all", uiViewer, &as)
	for _, a := range as {
		if a.ID == id {
			return a
		}
	}
	t.Fatalf("alarm %s not in the API's list", id)
	return uiAlarm{}
}

// TestPagesOnTokenSite drives the real binary on a site with tokens and
// no open reads: the page signs in through its box and sends the token;
// a viewer's acknowledgement and state change are refused with a clear
// message and change nothing; the operator's acknowledgement shows in
// the API with who and the comment; the certification view gives the
// same verdict as `cleanmon certify` on the same samples, and its HTML
// report matches the command's; a year of one location draws from the
// hourly rollups.
func TestPagesOnTokenSite(t *testing.T) {
	b := newBrowser(t)
	d := startDaemon(t, "--config", uiTokenSite(t), "--data", t.TempDir())
	now := time.Now().UTC().Truncate(time.Second)

	// Anonymous: nothing to read, and the page says why.
	b.open(d.url+"/alarms", "")
	b.waitJS(10*time.Second, "the page to ask for a token", `document.getElementById("who").textContent.startsWith("Not signed in") && document.getElementById("banner").textContent.includes("needs a valid access token")`)

	// An excursion raises an action alarm in the assembly hall (10 000
	// particles ≥0.5 µm in 28.3 L is 353 357 /m³, above the 280 000
	// action level of the site), then the room is clean again, so the
	// latched alarm waits for an acknowledgement.
	uiPost(t, d.url, []uiReading{
		{"pc-asm-1", "asm-1", now.Add(-3 * time.Minute), map[string]uint64{"0.5": 2000, "5": 10}},
		{"pc-asm-1", "asm-1", now.Add(-2 * time.Minute), map[string]uint64{"0.5": 10000, "5": 10}},
		{"pc-asm-1", "asm-1", now.Add(-time.Minute), map[string]uint64{"0.5": 2100, "5": 9}},
	})
	var excursion uiAlarm
	waitFor(t, 15*time.Second, "the excursion alarm", func() bool {
		var as []uiAlarm
		uiGet(t, d.url+"/api/v1/alarms", uiViewer, &as)
		for _, a := range as {
			if a.Kind == "excursion" && a.Zone == "assembly" && a.State == "active" {
				excursion = a
				return true
			}
		}
		return false
	})
	row := fmt.Sprintf(`tr[data-alarm-id=%q]`, excursion.ID)

	// A viewer sees the alarm but may not acknowledge it.
	b.signIn(uiViewer, "Signed in as wall-screen (viewer)")
	b.waitJS(10*time.Second, "the alarm in the list", fmt.Sprintf(`!!document.querySelector('%s .ack-btn')`, row))
	b.do(10*time.Second, "opening the acknowledgement", chromedp.Click(chromedp.CSS(row+" .ack-btn")))
	b.do(10*time.Second, "filling the acknowledgement",
		chromedp.SendKeys(chromedp.ID("ack-comment"), "checked from the wall screen"),
		chromedp.Click(chromedp.ID("ack-submit")))
	b.waitJS(10*time.Second, "the refusal", `document.getElementById("ack-msg").textContent.includes("needs the operator role")`)
	if a := uiAlarmByID(t, d.url, excursion.ID); a.AcknowledgedBy != "" || a.State != "active" {
		t.Errorf("a viewer's acknowledgement changed the alarm: %+v", a)
	}
	b.open(d.url+"/zones/assembly", `document.body.dataset.chartsReady === "yes"`)
	b.do(10*time.Second, "changing the state as a viewer",
		chromedp.SetValue(chromedp.ID("opstate-state"), "maintenance"),
		chromedp.SendKeys(chromedp.ID("opstate-reason"), "filter change"),
		chromedp.Click(chromedp.CSS(`#opstate-form button[type="submit"]`)))
	b.waitJS(10*time.Second, "the refusal", `document.getElementById("opstate-msg").textContent.includes("needs the operator role")`)
	var asm struct {
		OperatingState string               `json:"operating_state"`
		Change         *struct{ By string } `json:"operating_state_change"`
	}
	uiGet(t, d.url+"/api/v1/zones/assembly", uiViewer, &asm)
	if asm.OperatingState != "in-operation" {
		t.Errorf("a viewer changed the operating state: %+v", asm)
	}

	// The operator acknowledges through the page; the API shows who.
	b.signOut()
	b.signIn(uiOperator, "Signed in as shift-lead (operator)")
	b.do(10*time.Second, "changing the state as the operator",
		chromedp.SetValue(chromedp.ID("opstate-state"), "maintenance"),
		chromedp.SendKeys(chromedp.ID("opstate-by"), "r. ilves"),
		chromedp.SendKeys(chromedp.ID("opstate-reason"), "filter change"),
		chromedp.Click(chromedp.CSS(`#opstate-form button[type="submit"]`)))
	b.waitJS(10*time.Second, "the state change", `document.getElementById("opstate-msg").textContent.includes("MAINTENANCE")`)
	uiGet(t, d.url+"/api/v1/zones/assembly", uiViewer, &asm)
	if asm.OperatingState != "maintenance" || asm.Change == nil || asm.Change.By != "shift-lead (r. ilves)" {
		t.Errorf("after the operator's change: %+v", asm)
	}
	b.open(d.url+"/alarms", fmt.Sprintf(`!!document.querySelector('%s .ack-btn')`, row))
	b.do(10*time.Second, "acknowledging",
		chromedp.Click(chromedp.CSS(row+" .ack-btn")),
		chromedp.SendKeys(chromedp.ID("ack-by"), "r. ilves"),
		chromedp.SendKeys(chromedp.ID("ack-comment"), "door held for a delivery"),
		chromedp.Click(chromedp.ID("ack-submit")))
	b.waitJS(10*time.Second, "the acknowledgement", `document.getElementById("alarms-msg").textContent.includes("Acknowledged by shift-lead (r. ilves)")`)
	if a := uiAlarmByID(t, d.url, excursion.ID); a.AcknowledgedBy != "shift-lead (r. ilves)" || a.Comment != "door held for a delivery" {
		t.Errorf("after the page's acknowledgement the API shows %+v", a)
	}
	b.do(10*time.Second, "showing recent alarms", chromedp.Click(chromedp.CSS(`[data-view="all"]`)))
	b.waitJS(10*time.Second, "the acknowledged alarm among the recent ones",
		fmt.Sprintf(`(() => { const r = document.querySelector('%s'); return r && r.querySelector(".acked").textContent.includes("door held for a delivery"); })()`, row))
	b.screenshot("alarms")
	// Etc/GMT-3 is UTC+3 all year (the IANA database's sign is inverted).
	uiTimesOnSiteClock(t, b, "alarms page", time.FixedZone("Etc/GMT-3", 3*3600))

	uiCertification(t, b, d, now)
	uiNotCurrent(t, b, d.url)
	uiYearChart(t, b, d, now)
	b.checkConsole("status of 401", "status of 403")
}

// uiCertification posts planned samples of the coating hood and compares,
// for a clean period and one with an excursion, the certification page
// with `cleanmon certify` on a file of the same samples.
func uiCertification(t *testing.T, b *browser, d *process, now time.Time) {
	base := now.Truncate(time.Minute).Add(-3 * time.Hour)
	var rs []uiReading
	for i := 0; i < 5; i++ {
		at := base.Add(time.Duration(i) * time.Minute)
		rs = append(rs,
			uiReading{"pc-hood-1", "hood-1", at, map[string]uint64{"0.5": uint64(40 + i), "1": 8}},
			uiReading{"pc-hood-2", "hood-2", at, map[string]uint64{"0.5": 55, "1": uint64(10 + i%2)}})
		at = at.Add(30 * time.Minute)
		// 150 particles ≥0.5 µm in 28.3 L is 5 300 /m³, above ISO 5's
		// 3 520 /m³ (ISO 14644-1:2015 Table 1).
		rs = append(rs,
			uiReading{"pc-hood-1", "hood-1", at, map[string]uint64{"0.5": 42, "1": 9}},
			uiReading{"pc-hood-2", "hood-2", at, map[string]uint64{"0.5": uint64(150 + i), "1": 12}})
	}
	uiPost(t, d.url, rs)

	dl := t.TempDir()
	ctx, cancel := context.WithTimeout(b.ctx, 10*time.Second)
	_, err := chromedp.CallBrowser(ctx, cdpbrowser.SetDownloadBehavior, cdpbrowser.SetDownloadBehaviorParams{
		Behavior: cdpbrowser.SetDownloadBehaviorBehaviorAllow, DownloadPath: dl, EventsEnabled: new(true)})
	cancel()
	if err != nil {
		t.Fatalf("allowing downloads: %v", err)
	}

	cases := []struct {
		name     string
		from, to time.Time
		want     string
	}{
		{"clean period", base.Add(-30 * time.Second), base.Add(5 * time.Minute), "pass"},
		{"excursion at hood-2", base.Add(29*time.Minute + 30*time.Second), base.Add(35 * time.Minute), "fail"},
	}
	for i, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			// The samples file of the same readings, for the command.
			var csv strings.Builder
			csv.WriteString("location,time,volume_l,0.5um,1um\n")
			for _, r := range rs {
				if !r.at.Before(c.from) && r.at.Before(c.to) {
					fmt.Fprintf(&csv, "%s,%s,28.3,%d,%d\n", r.location, r.at.Format(time.RFC3339), r.counts["0.5"], r.counts["1"])
				}
			}
			file := filepath.Join(t.TempDir(), "samples.csv")
			os.WriteFile(file, []byte(csv.String()), 0o600)
			args := []string{"certify", "--class", "5", "--area", "3", "--sizes", "0.5,1", "--state", "in-operation"}
			cmdJSON, code := uiRun(t, append(args, "--format", "json", file)...)
			cmdHTML, _ := uiRun(t, append(args, "--format", "html", file)...)
			var want struct {
				Verdict   string
				Problems  []string
				Locations []struct {
					ID   string
					Mean map[string]float64 `json:"mean_per_m3"`
				}
			}
			if err := json.Unmarshal(cmdJSON, &want); err != nil {
				t.Fatalf("certify --format json: %v in %s", err, cmdJSON)
			}
			if want.Verdict != c.want || (code == 0) != (c.want == "pass") {
				t.Fatalf("certify says %s (exit %d) on %s; the case expects %s", want.Verdict, code, csv.String(), c.want)
			}

			b.open(d.url+"/certify?zone=coating-hood&from="+c.from.Format(time.RFC3339)+"&to="+c.to.Format(time.RFC3339),
				`document.body.dataset.certReady === "yes"`)
			var page struct {
				Verdict, Text string
				Problems      int
				Means         map[string]string
			}
			b.eval(`({verdict: document.getElementById("verdict").dataset.verdict || "", text: document.getElementById("verdict").innerText,
				problems: +document.getElementById("cert-problems").dataset.count,
				means: Object.fromEntries([...document.querySelectorAll("#cert-locations tr[data-location]")].map(r => [r.dataset.location + "/" + r.dataset.size, r.querySelector(".mean").textContent]))})`, &page)
			if page.Verdict != want.Verdict || !strings.Contains(page.Text, strings.ToUpper(want.Verdict)) {
				t.Errorf("page verdict %q (%q), certify %q", page.Verdict, page.Text, want.Verdict)
			}
			if page.Problems != len(want.Problems) {
				t.Errorf("page lists %d problems, certify %d: %q", page.Problems, len(want.Problems), want.Problems)
			}
			for _, l := range want.Locations {
				for size, mean := range l.Mean {
					got, err := strconv.ParseFloat(strings.NewReplacer("\u2009", "", "−", "-").Replace(page.Means[l.ID+"/"+size]), 64)
					if err != nil || math.Abs(got-mean) > 0.5+1e-3*mean { // the page rounds to whole particles/m³
						t.Errorf("location %s ≥%s µm: page mean %q, certify %.3f", l.ID, size, page.Means[l.ID+"/"+size], mean)
					}
				}
			}

			if c.want == "fail" {
				b.screenshot("certify")
			}

			// Both downloads: the HTML report is the command's report for
			// the same samples (but for the header naming where the
			// samples came from), and names the SHA-256 of the JSON.
			b.do(10*time.Second, "downloading the report", chromedp.Click(chromedp.ID("dl-html")))
			html := uiDownloaded(t, dl, fmt.Sprintf("certification-coating-hood-%s-%s.html", c.from.Format("20060102T1504Z"), c.to.Format("20060102T1504Z")))
			b.do(10*time.Second, "downloading the JSON", chromedp.Click(chromedp.ID("dl-json")))
			js := uiDownloaded(t, dl, "certification-coating-hood.json")
			os.Remove(filepath.Join(dl, "certification-coating-hood.json"))
			if got, want := uiReportBody(t, html), uiReportBody(t, cmdHTML); got != want {
				t.Errorf("case %d: the page's report differs from certify --format html:\npage:\n%s\ncertify:\n%s", i, got, want)
			}
			sum := sha256.Sum256(js)
			if !bytes.Contains(html, []byte(hex.EncodeToString(sum[:]))) {
				t.Errorf("the report does not name the SHA-256 of the downloaded JSON (%x)", sum)
			}
			var fromJSON struct{ Verdict string }
			if err := json.Unmarshal(js, &fromJSON); err != nil || fromJSON.Verdict != want.Verdict {
				t.Errorf("downloaded JSON verdict %q (%v), want %q", fromJSON.Verdict, err, want.Verdict)
			}
		})
	}
}

// uiRun runs the real binary and returns its stdout and exit status.
func uiRun(t *testing.T, args ...string) ([]byte, int) {
	t.Helper()
	cmd := exec.Command(cleanmonBinary(t), args...)
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	var ee *exec.ExitError
	switch {
	case err == nil:
		return out, 0
	case errors.As(err, &ee) && ee.ExitCode() == 1:
		return out, 1
	}
	t.Fatalf("cleanmon %s: %v\n%s", strings.Join(args, " "), err, stderr.String())
	return nil, 0
}

// uiDownloaded waits (bounded) for a finished download.
func uiDownloaded(t *testing.T, dir, name string) []byte {
	t.Helper()
	var b []byte
	waitFor(t, 15*time.Second, "the download of "+name, func() bool {
		var err error
		b, err = os.ReadFile(filepath.Join(dir, name))
		return err == nil && len(b) > 0
	})
	return b
}

// uiReportBody is a certification report's result and summary: what the
// samples say, without the header and the appendix that name where they
// came from.
var reportBodyRE = regexp.MustCompile(`(?s)<h2>Result</h2>.*<h2>Location map</h2>`)

func uiReportBody(t *testing.T, html []byte) string {
	t.Helper()
	m := reportBodyRE.Find(html)
	if m == nil {
		t.Fatalf("not a certification report:\n%s", html)
	}
	return string(m)
}

// uiYearChart posts a year of hourly readings for one location and draws
// the zone page's year view, which comes from the hourly rollups, and
// prints how long the browser took (a measurement, not a timed assertion).
func uiYearChart(t *testing.T, b *browser, d *process, now time.Time) {
	end := now.Truncate(time.Hour)
	var rs []uiReading
	for i := 1; i <= 8760; i++ {
		// A seasonal swing and a daily one, so that the screenshot shows a shape.
		season := 1 + 0.5*math.Sin(2*math.Pi*float64(i)/8760)
		day := 1 + 0.3*math.Sin(2*math.Pi*float64(i)/24)
		rs = append(rs, uiReading{"pc-met", "met-1", end.Add(-time.Duration(i) * time.Hour),
			map[string]uint64{"0.5": uint64(200*season*day) + uint64((i*37)%40), "1": uint64(40*season*day) + uint64((i*13)%9)}})
	}
	uiPost(t, d.url, rs)
	b.open(d.url+"/zones/metrology?range=1y", `document.body.dataset.chartsReady === "yes"`)
	var got struct {
		Rows, Fetch, Draw string
		Info              string
		Points            int
	}
	b.eval(`({rows: document.body.dataset.chartRows, fetch: document.body.dataset.chartFetchMs, draw: document.body.dataset.chartDrawMs,
		info: document.getElementById("chart-info").textContent,
		points: [...document.querySelectorAll("#charts path.series")].reduce((n, p) => n + (p.getAttribute("d").match(/[ML]/g) || []).length, 0)})`, &got)
	rows, _ := strconv.Atoi(got.Rows)
	if rows < 8750 || rows > 8761 || !strings.Contains(got.Info, "step 1h") {
		t.Errorf("year view: %d rows, %q; want 8 760 hourly rollups", rows, got.Info)
	}
	if got.Points != 2*rows { // one path point per row and size, two sizes
		t.Errorf("year view draws %d points for %d rows", got.Points, rows)
	}
	t.Logf("year of one location (%d hourly rollups, 2 sizes): fetched and parsed in %s ms, drawn in %s ms", rows, got.Fetch, got.Draw)
	b.screenshot("zone-metrology-year")
}
