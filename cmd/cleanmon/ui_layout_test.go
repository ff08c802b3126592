package main

import (
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// uiViewport emulates a screen of w×h CSS pixels and opens url on it.
func (b *browser) viewport(w, h int64, url, ready string) {
	b.t.Helper()
	b.do(10*time.Second, fmt.Sprintf("emulating %d×%d", w, h), chromedp.EmulateViewport(w, h))
	b.open(url, ready)
}

// clipped lists what does not fit the viewport's width on the open page:
// a page wider than the viewport, and every visible button or zone card
// whose box leaves the viewport sideways or is cut by a scrolling or
// clipping container around it.
const clippedJS = `(() => {
  const out = [];
  const W = window.innerWidth;
  if (document.documentElement.scrollWidth > W + 1) out.push("page " + document.documentElement.scrollWidth + " px wide in a " + W + " px viewport");
  const name = (n) => n.tagName.toLowerCase() + (n.id ? "#" + n.id : "") + (n.dataset.zone ? "[" + n.dataset.zone + "]" : "") + " " + JSON.stringify((n.innerText || "").slice(0, 40));
  for (const n of document.querySelectorAll("button, .zone-card, .dp-chip, input, select")) {
    const r = n.getBoundingClientRect();
    if (r.width === 0 && r.height === 0) continue; // hidden
    if (r.left < -1 || r.right > W + 1) out.push(name(n) + " spans x " + Math.round(r.left) + "–" + Math.round(r.right));
    for (let p = n.parentElement; p && p !== document.body; p = p.parentElement) {
      const cs = getComputedStyle(p);
      if (cs.overflowX === "visible" && cs.overflowY === "visible") continue;
      const q = p.getBoundingClientRect();
      if (r.left < q.left - 1 || r.right > q.right + 1) out.push(name(n) + " cut by " + name(p));
    }
  }
  return out;
})()`

// uiNothingClipped fails the test for anything clippedJS finds.
func (b *browser) nothingClipped(what string) {
	b.t.Helper()
	var bad []string
	b.eval(clippedJS, &bad)
	for _, s := range bad {
		b.t.Errorf("%s: %s", what, s)
	}
}

// uiWallScreen checks the overview on a 1920×1080 wall screen: every zone
// of the demo site is inside the screen without scrolling.
func uiWallScreen(t *testing.T, b *browser, url string, zones []uiZone) {
	b.viewport(1920, 1080, url+"/", `document.body.dataset.ready === "yes"`)
	var boxes map[string][4]float64
	b.eval(`Object.fromEntries([...document.querySelectorAll(".zone-card[data-zone]")].map(n => { const r = n.getBoundingClientRect(); return [n.dataset.zone, [r.left, r.top, r.right, r.bottom]]; }))`, &boxes)
	for _, z := range zones {
		r, ok := boxes[z.ID]
		if !ok {
			t.Errorf("1920×1080: zone %s not on the overview", z.ID)
			continue
		}
		if r[0] < 0 || r[1] < 0 || r[2] > 1920 || r[3] > 1080 {
			t.Errorf("1920×1080: zone %s at %v is not inside the screen without scrolling", z.ID, r)
		}
	}
	b.nothingClipped("overview at 1920×1080")
	b.screenshot("overview-1920x1080")
	b.open(url+"/zones/assembly", `document.body.dataset.chartsReady === "yes"`)
	b.nothingClipped("zone page at 1920×1080")
	b.screenshot("zone-1920x1080")
	b.open(url+"/alarms", `document.body.dataset.ready === "yes"`)
	b.nothingClipped("alarms page at 1920×1080")
	b.screenshot("alarms-1920x1080")
	b.open(url+"/", `document.body.dataset.ready === "yes"`)
}

// uiSmallScreen opens the overview, a zone page and the alarms page on a
// 1024×768 screen: nothing is wider than the screen, no button is cut.
func uiSmallScreen(t *testing.T, b *browser, url, zone string) {
	b.viewport(1024, 768, url+"/", `document.body.dataset.ready === "yes"`)
	b.nothingClipped("overview at 1024×768")
	b.screenshot("overview-1024x768")
	b.open(url+"/zones/"+zone, `document.body.dataset.chartsReady === "yes"`)
	b.waitJS(10*time.Second, "the DP charts", `document.querySelectorAll("#dp-charts svg.chart, #dp-charts p").length > 0`)
	b.nothingClipped("zone page at 1024×768")
	uiZoneAlarms(t, b, zone)
	b.screenshot("zone-1024x768")
	b.open(url+"/alarms", `document.body.dataset.ready === "yes" && !!document.querySelector(".ack-btn")`)
	b.nothingClipped("alarms page at 1024×768")
	b.screenshot("alarms-1024x768")
	b.do(10*time.Second, "leaving 1024×768", chromedp.ResetViewport())
}

// uiHeadlineNotClear checks that a zone with an open action alarm is not
// shown clear: the card's headline is neither the clear word nor its
// colour, whatever the daemon's attention says.
func uiHeadlineNotClear(t *testing.T, b *browser, zone string) {
	var card struct {
		Attention, Headline, Class string
	}
	b.eval(fmt.Sprintf(`(() => { const n = document.querySelector('.zone-card[data-zone=%q]'); const h = n.querySelector(".headline");
		return {attention: n.dataset.attention, headline: h ? h.innerText : "", class: h ? h.className : ""}; })()`, zone), &card)
	if card.Attention == "none" || strings.Contains(card.Headline, "CLEAR") || strings.Contains(card.Class, "st-in-class") || card.Headline == "" {
		t.Errorf("zone %s with an open action alarm shows headline %+v", zone, card)
	}
}

// uiTimesOnSiteClock checks every <time> of the open page: its text is its
// instant on the site's clock (loc), in 24-hour ISO order.
func uiTimesOnSiteClock(t *testing.T, b *browser, what string, loc *time.Location) {
	var times []struct{ Datetime, Text string }
	b.eval(`[...document.querySelectorAll("time[datetime]")].filter(n => n.getAttribute("datetime")).map(n => ({datetime: n.getAttribute("datetime"), text: n.textContent}))`, &times)
	if len(times) == 0 {
		t.Errorf("%s shows no times", what)
	}
	var tz string
	b.eval(`document.getElementById("tz").dataset.tz || ""`, &tz)
	if tz != loc.String() {
		t.Errorf("%s: the page's clock is %q, the site's %q", what, tz, loc)
	}
	for _, x := range times {
		at, err := time.Parse(time.RFC3339Nano, x.Datetime)
		if err != nil {
			t.Errorf("%s: datetime %q: %v", what, x.Datetime, err)
			continue
		}
		full, short := at.In(loc).Format("2006-01-02 15:04:05"), at.In(loc).Format("15:04:05")
		if x.Text != full && x.Text != short {
			t.Errorf("%s: %s shown as %q, want %q or %q (%s)", what, x.Datetime, x.Text, full, short, loc)
		}
	}
}

// uiZoneAlarms checks the zone page's open alarms: every open alarm of the
// zone object, and no download of the site's alarm list (the page polls
// every 5 s; it waits for a second poll before looking).
func uiZoneAlarms(t *testing.T, b *browser, zone string) {
	b.waitJS(15*time.Second, "every open alarm of "+zone+" on its page", fmt.Sprintf(`(async () => {
		const z = await (await fetch("/api/v1/zones/%s")).json();
		const want = z.active_alarms.map(a => a.id).sort().join("\n");
		const got = [...document.querySelectorAll("#zone-alarms tr[data-alarm-id]")].map(r => r.dataset.alarmId).sort().join("\n");
		return z.active_alarms.length > 0 && got === want;
	})()`, zone))
	b.waitJS(15*time.Second, "a second poll of the zone", `performance.getEntriesByType("resource").filter(e => e.name.includes("/api/v1/zones/")).length >= 2`)
	var fetched []string
	b.eval(`performance.getEntriesByType("resource").map(e => e.name).filter(n => n.includes("/api/v1/alarms"))`, &fetched)
	if len(fetched) > 0 {
		t.Errorf("the zone page downloads the site's alarm list: %v", fetched)
	}
}

// uiNotCurrent checks, on a site whose coating hood was last sampled
// hours ago and whose DP sensor never reported, that no old value is
// shown as current: the hood's card and page show no concentration, the
// sensor no number.
func uiNotCurrent(t *testing.T, b *browser, url string) {
	b.open(url+"/", `document.body.dataset.ready === "yes"`)
	var ov struct {
		Share, DP string
		Headline  string
	}
	b.eval(`({share: (document.querySelector('.zone-card[data-zone="coating-hood"] .zc-share') || {}).textContent || "",
		dp: (document.querySelector('.dp-chip[data-sensor="dp-asm"] .dp-value') || {}).textContent || "",
		headline: (document.querySelector('.zone-card[data-zone="coating-hood"] .headline') || {}).textContent || ""})`, &ov)
	if ov.Share != "No current concentration" || ov.DP != "—" || strings.Contains(ov.Headline, "CLEAR") {
		t.Errorf("overview of stale data: %+v; want no concentration, no DP number, no clear headline", ov)
	}
	b.open(url+"/zones/coating-hood", `document.body.dataset.chartsReady === "yes"`)
	var cells []struct {
		Current string
		Values  []string
	}
	b.eval(`[...document.querySelectorAll("#zone-table tr[data-location]")].map(r => ({current: r.dataset.current, values: [...r.querySelectorAll("td.n")].map(c => c.textContent)}))`, &cells)
	if len(cells) != 2 {
		t.Fatalf("coating hood page lists %d locations, want 2", len(cells))
	}
	for _, c := range cells {
		if c.Current != "no" {
			t.Errorf("a location last sampled hours ago is shown current: %+v", c)
		}
		for _, v := range c.Values {
			if v != "—" {
				t.Errorf("a location last sampled hours ago shows %q as its value", v)
			}
		}
	}
}

// evalAsync evaluates an expression that yields a promise and decodes
// what it resolves to.
func (b *browser) evalAsync(js string, v any) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 20*time.Second)
	defer cancel()
	raw, err := chromedp.Run(ctx, chromedp.Evaluate[[]byte](js, chromedp.EvalAwaitPromise))
	if err != nil {
		b.t.Fatalf("evaluating %s: %v%s", js, err, b.consoleText())
	}
	if err := json.Unmarshal(raw, v); err != nil {
		b.t.Fatalf("evaluating %s: %v in %s", js, err, raw)
	}
}

// uiClearRule drives the pages' own rule for the clear headline in the
// open page: clear needs the daemon's "none" and nothing in the zone
// object against it; an absent or unknown attention is UNKNOWN.
func uiClearRule(t *testing.T, b *browser) {
	cases := []struct {
		name, zone string
		against    int
	}{
		{"all well", `{state: "in-class", active_alarms: [], locations: [{id: "l", fresh: true, trusted: true}], sensors: [{id: "dp", status: "ok"}]}`, 0},
		{"particles not in class", `{state: "alert", active_alarms: [], locations: [], sensors: []}`, 1},
		{"an alarm open", `{state: "in-class", active_alarms: [{state: "acknowledged"}], locations: [], sensors: []}`, 1},
		{"a delayed alarm is not open yet", `{state: "in-class", active_alarms: [{state: "delayed"}], locations: [], sensors: []}`, 0},
		{"a stale and an untrusted location", `{state: "in-class", active_alarms: [], locations: [{id: "a", fresh: false, trusted: true}, {id: "b", fresh: true, trusted: false}], sensors: []}`, 1},
		{"a silent and a reversed sensor", `{state: "in-class", active_alarms: [], locations: [], sensors: [{id: "a", status: "silent", pa: null}, {id: "b", status: "reversed", pa: -3.5}]}`, 1},
		{"everything at once", `{state: "unknown", active_alarms: [{state: "active"}], locations: [{id: "a", fresh: false}], sensors: [{id: "b", status: "low"}]}`, 4},
	}
	for _, c := range cases {
		var n int
		b.evalAsync(fmt.Sprintf(`(async () => (await import("/assets/common.js")).clearContradicted(%s).length)()`, c.zone), &n)
		if n != c.against {
			t.Errorf("%s: %d reasons against clear, want %d", c.name, n, c.against)
		}
	}
	var shown []string
	b.evalAsync(`(async () => { const m = await import("/assets/common.js"); return [undefined, null, "", "fine", "none", "action"].map(a => m.attentionBadge(a).dataset.attention + ":" + m.attentionBadge(a).querySelector(".word").textContent); })()`, &shown)
	want := []string{"unknown:UNKNOWN", "unknown:UNKNOWN", "unknown:UNKNOWN", "unknown:UNKNOWN", "none:CLEAR", "action:ACTION"}
	if strings.Join(shown, ",") != strings.Join(want, ",") {
		t.Errorf("attention badges %v, want %v", shown, want)
	}
}
