package main

import (
	"bytes"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"os"
	"path"
	"path/filepath"
	"regexp"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"cleanmon/alerts"
	"cleanmon/collector"
)

// TestPageRoutes serves every page and every embedded asset through the
// real daemon: each with the strict policy and the other security
// headers, its content type and its embedded bytes, revalidated by ETag,
// and answering HEAD; a zone that does not exist and a missing asset are
// 404s, with the zone name escaped.
func TestPageRoutes(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	type want struct {
		path, ctype string
		body        []byte
	}
	var cases []want
	for name, page := range map[string]string{"/": "overview.html", "/alarms": "alarms.html", "/certify": "certify.html", "/zones/hood": "zone.html"} {
		cases = append(cases, want{name, "text/html; charset=utf-8", webPages[page].body})
	}
	for name, f := range webAssets {
		cases = append(cases, want{"/assets/" + name, contentTypes[path.Ext(name)], f.body})
	}
	sort.Slice(cases, func(i, j int) bool { return cases[i].path < cases[j].path })
	if len(webAssets) < 7 || len(webPages) != 4 {
		t.Fatalf("embedded %d assets and %d pages; want the 4 pages and their scripts, style sheet and icon", len(webAssets), len(webPages))
	}
	for _, c := range cases {
		t.Run(c.path, func(t *testing.T) {
			code, h, body := d.do("GET", c.path, "", "", nil)
			if code != http.StatusOK || !bytes.Equal(body, c.body) {
				t.Fatalf("%d, %d bytes; want 200 with the %d embedded bytes", code, len(body), len(c.body))
			}
			for k, v := range map[string]string{
				"Content-Security-Policy": pageCSP, "X-Content-Type-Options": "nosniff", "Referrer-Policy": "no-referrer",
				"X-Frame-Options": "DENY", "Content-Type": c.ctype,
			} {
				if h.Get(k) != v {
					t.Errorf("%s: %q, want %q", k, h.Get(k), v)
				}
			}
			req, _ := http.NewRequest("GET", d.url+c.path, nil)
			req.Header.Set("If-None-Match", h.Get("ETag"))
			resp, err := d.client.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			resp.Body.Close()
			if h.Get("ETag") == "" || resp.StatusCode != http.StatusNotModified {
				t.Errorf("revalidation with ETag %q: %d, want 304", h.Get("ETag"), resp.StatusCode)
			}
			code, h, body = d.do("HEAD", c.path, "", "", nil)
			if code != http.StatusOK || len(body) != 0 || h.Get("Content-Security-Policy") != pageCSP {
				t.Errorf("HEAD: %d, %d bytes, policy %q", code, len(body), h.Get("Content-Security-Policy"))
			}
		})
	}
	for _, c := range []struct {
		path, ctype, contains, lacks string
	}{
		{"/zones/%3Cb%3Enope", "text/html; charset=utf-8", "&lt;b&gt;nope", "<b>"},
		{"/assets/nope.js", "application/json", `"error":"no such asset: /assets/nope.js"`, ""},
		{"/assets/", "application/json", `"error"`, ""},
	} {
		t.Run(c.path, func(t *testing.T) {
			code, h, body := d.do("GET", c.path, "", "", nil)
			if code != http.StatusNotFound || h.Get("Content-Type") != c.ctype || !strings.Contains(string(body), c.contains) ||
				(c.lacks != "" && strings.Contains(string(body), c.lacks)) {
				t.Errorf("%d %q %s", code, h.Get("Content-Type"), body)
			}
			if h.Get("Content-Security-Policy") != pageCSP {
				t.Errorf("policy %q", h.Get("Content-Security-Policy"))
			}
		})
	}
}

// TestPagesRunUnderStrictPolicy reads the embedded files as the policy
// would: no inline script, no style attribute, no event-handler
// attribute, nothing from another origin, one module per page, every
// referenced asset present, and no script that turns text into markup.
func TestPagesRunUnderStrictPolicy(t *testing.T) {
	tag := regexp.MustCompile(`(?is)<([a-z][a-z0-9]*)([^>]*)>`)
	attr := regexp.MustCompile(`(?is)\s([a-z-]+)\s*=\s*"([^"]*)"`)
	for name, f := range webPages {
		t.Run(name, func(t *testing.T) {
			modules := 0
			for _, m := range tag.FindAllStringSubmatch(string(f.body), -1) {
				el, attrs := strings.ToLower(m[1]), map[string]string{}
				for _, a := range attr.FindAllStringSubmatch(m[2], -1) {
					attrs[strings.ToLower(a[1])] = a[2]
				}
				for k, v := range attrs {
					switch {
					case k == "style":
						t.Errorf("<%s style=%q>: a style attribute the policy refuses", el, v)
					case strings.HasPrefix(k, "on"):
						t.Errorf("<%s %s=...>: an event-handler attribute the policy refuses", el, k)
					case strings.HasPrefix(strings.ToLower(v), "javascript:"):
						t.Errorf("<%s %s=%q>: a javascript: URL", el, k, v)
					case (k == "src" || k == "href") && strings.HasPrefix(v, "/assets/"):
						if webAssets[strings.TrimPrefix(v, "/assets/")] == nil {
							t.Errorf("<%s %s=%q>: no such embedded asset", el, k, v)
						}
					case (k == "src" || k == "href") && strings.Contains(v, "//"):
						t.Errorf("<%s %s=%q>: another origin", el, k, v)
					}
				}
				switch el {
				case "script":
					if attrs["src"] == "" {
						t.Error("an inline <script>")
					}
					if attrs["type"] != "module" {
						t.Errorf("<script src=%q> is not a module", attrs["src"])
					}
					modules++
				case "style":
					t.Error("an inline <style> block")
				}
			}
			if modules != 1 {
				t.Errorf("%d module scripts, want one", modules)
			}
		})
	}
	forbidden := []string{"innerHTML", "outerHTML", "insertAdjacentHTML", "document.write", "eval(", "new Function", `setAttribute("style"`, ".style.", "https://"}
	imports := regexp.MustCompile(`(?m)from "\./([^"]+)"`)
	for name, f := range webAssets {
		if path.Ext(name) != ".js" {
			continue
		}
		t.Run(name, func(t *testing.T) {
			src := string(f.body)
			for _, bad := range forbidden {
				if strings.Contains(src, bad) {
					t.Errorf("contains %q", bad)
				}
			}
			// The one http:// string allowed is the SVG namespace name.
			if strings.Count(src, "http://") != strings.Count(src, "http://www.w3.org/2000/svg") {
				t.Error("refers to an http:// address other than the SVG namespace")
			}
			for _, m := range imports.FindAllStringSubmatch(src, -1) {
				if webAssets[m[1]] == nil {
					t.Errorf("imports ./%s, which is not embedded", m[1])
				}
			}
		})
	}
}

// TestUISession asks GET /ui/session with each kind of token, on a site
// with and without open reads; it names the token, never returns it.
func TestUISession(t *testing.T) {
	for _, open := range []bool{false, true} {
		d := startSite(t, apiSite(open), "")
		cases := []struct {
			token              string
			code               int
			name, role         string
			mayRead, mayOperat bool
		}{
			{"", map[bool]int{false: 401, true: 200}[open], "", "", open, false},
			{"not-a-token", 401, "", "", false, false},
			{secretViewer, 200, "display", "viewer", true, false},
			{secretOperator, 200, "shift-lead", "operator", true, true},
			{secretAdmin, 200, "admin", "admin", true, true},
			// An ingest token may not read; with open reads it passes as
			// anyone does, and is still named.
			{secretIngest, map[bool]int{false: 403, true: 200}[open], "scada", "ingest", open, false},
		}
		for _, c := range cases {
			t.Run(fmt.Sprintf("open_reads=%v/%s", open, c.name+c.token[:min(4, len(c.token))]), func(t *testing.T) {
				code, _, b := d.do("GET", "/ui/session", c.token, "", nil)
				if code != c.code {
					t.Fatalf("%d %s, want %d", code, b, c.code)
				}
				if c.token != "" && bytes.Contains(b, []byte(c.token)) {
					t.Errorf("the answer holds the token: %s", b)
				}
				if code != 200 {
					decodeAPIError(t, b)
					return
				}
				var s uiSessionJSON
				if err := json.Unmarshal(b, &s); err != nil {
					t.Fatal(err)
				}
				want := uiSessionJSON{OpenReads: open, SignedIn: c.name != "", Name: c.name, Role: c.role, MayRead: c.mayRead, MayOperate: c.mayOperat}
				if s != want {
					t.Errorf("%+v, want %+v", s, want)
				}
			})
		}
	}
}

// TestSiteAreas orders the pressure cascade: an area is one step above
// the highest of its low sides.
func TestSiteAreas(t *testing.T) {
	demo, err := demoConfig()
	if err != nil {
		t.Fatal(err)
	}
	z := func(ids ...string) []alerts.ZoneConfig {
		var out []alerts.ZoneConfig
		for _, id := range ids {
			out = append(out, alerts.ZoneConfig{ID: id})
		}
		return out
	}
	dp := func(pairs ...string) []collector.Sensor {
		var out []collector.Sensor
		for i := 0; i+1 < len(pairs); i += 2 {
			out = append(out, collector.Sensor{ID: fmt.Sprintf("dp-%d", i/2), High: pairs[i], Low: pairs[i+1]})
		}
		return out
	}
	cases := []struct {
		name    string
		zones   []alerts.ZoneConfig
		sensors []collector.Sensor
		want    map[string]int
		areas   []string // ids that are not zones
	}{
		// DESIGN.md §6: hood → assembly, metrology → assembly,
		// assembly → gowning, gowning → corridor.
		{"demo site", demo.Zones, demo.PressureSensors,
			map[string]int{"coating-hood": 3, "metrology": 3, "assembly": 2, "gowning": 1, "corridor": 0}, nil},
		{"no sensors", z("a", "b"), nil, map[string]int{"a": 0, "b": 0}, nil},
		{"low side not a zone", z("a"), dp("a", "outside"), map[string]int{"a": 1, "outside": 0}, []string{"outside"}},
		{"longest path wins", z("a", "b", "c"), dp("a", "c", "a", "b", "b", "c"), map[string]int{"a": 2, "b": 1, "c": 0}, nil},
		{"cycle is cut", z("a", "b"), dp("a", "b", "b", "a"), map[string]int{"a": 1, "b": 0}, nil},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := siteAreas(c.zones, c.sensors)
			levels := map[string]int{}
			var areas []string
			for _, a := range got {
				levels[a.ID] = a.Level
				if !a.Zone {
					areas = append(areas, a.ID)
				}
			}
			if fmt.Sprint(levels) != fmt.Sprint(c.want) || !slices.Equal(areas, c.areas) {
				t.Errorf("levels %v, areas %v; want %v, %v", levels, areas, c.want, c.areas)
			}
			for i, zc := range c.zones {
				if got[i].ID != zc.ID {
					t.Errorf("position %d: %s, want the zones first in configuration order", i, got[i].ID)
				}
			}
		})
	}
}

// TestUIPressure reduces posted DP samples to buckets and checks each
// bucket's count, minimum, mean and maximum against the samples.
func TestUIPressure(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	start := time.Now().UTC().Add(-time.Hour).Truncate(time.Minute)
	var body strings.Builder
	type sample struct {
		at time.Time
		pa float64
	}
	var samples []sample
	for i := 0; i < 120; i++ { // 20 minutes at 10 s, with a door dip and a reversal
		pa := 12 + math.Sin(float64(i)/7)
		switch {
		case i >= 40 && i < 43:
			pa = 2.5
		case i == 90:
			pa = -1.25
		}
		s := sample{start.Add(time.Duration(i) * 10 * time.Second), pa}
		samples = append(samples, s)
		fmt.Fprintf(&body, `{"sensor":"dp-hood","time":%q,"pa":%v}`+"\n", s.at.Format(time.RFC3339), s.pa)
	}
	if code, _, b := d.do("POST", "/api/v1/pressure", secretIngest, "application/x-ndjson", []byte(body.String())); code != 200 {
		t.Fatalf("posting DP: %d %s", code, b)
	}
	from, to := start, start.Add(20*time.Minute)
	q := "?from=" + from.Format(time.RFC3339) + "&to=" + to.Format(time.RFC3339)
	for _, points := range []int{1, 7, 10, 120, 500} {
		t.Run(fmt.Sprint(points, " points"), func(t *testing.T) {
			var got uiDPHistoryJSON
			d.getJSON(fmt.Sprintf("/ui/pressure/dp-hood%s&points=%d", q, points), &got)
			width := max(to.Sub(from)/time.Duration(points), time.Second)
			type acc struct {
				n             int
				min, max, sum float64
			}
			want := map[int64]*acc{}
			for _, s := range samples {
				k := from.Add(s.at.Sub(from) / width * width).UnixNano()
				a := want[k]
				if a == nil {
					a = &acc{min: s.pa, max: s.pa}
					want[k] = a
				}
				a.n++
				a.sum += s.pa
				a.min, a.max = math.Min(a.min, s.pa), math.Max(a.max, s.pa)
			}
			if len(got.Points) != len(want) || got.MinPa != 5 || got.High != "hood" || got.Low != "corridor" {
				t.Fatalf("%d buckets (min_pa %v, %s → %s), want %d", len(got.Points), got.MinPa, got.High, got.Low, len(want))
			}
			n := 0
			for _, p := range got.Points {
				w := want[p.Time.UnixNano()]
				if w == nil {
					t.Fatalf("bucket at %s: no samples fall there", p.Time)
				}
				n += p.N
				if p.N != w.n || p.Min != w.min || p.Max != w.max || math.Abs(p.Mean-w.sum/float64(w.n)) > 1e-9 {
					t.Errorf("bucket %s: %+v, want n %d min %v mean %v max %v", p.Time, p, w.n, w.min, w.sum/float64(w.n), w.max)
				}
			}
			if n != len(samples) {
				t.Errorf("buckets hold %d samples, want %d", n, len(samples))
			}
		})
	}
	for _, c := range []struct {
		path, token string
		code        int
		field       string
	}{
		{"/ui/pressure/dp-hood" + q + "&points=0", secretViewer, 400, "points"},
		{"/ui/pressure/dp-hood" + q + "&points=5001", secretViewer, 400, "points"},
		{"/ui/pressure/dp-hood" + q + "&points=ten", secretViewer, 400, "points"},
		{"/ui/pressure/dp-hood?from=" + to.Format(time.RFC3339) + "&to=" + from.Format(time.RFC3339), secretViewer, 400, "from"},
		{"/ui/pressure/dp-none" + q, secretViewer, 404, ""},
		{"/ui/pressure/dp-hood" + q, "", 401, ""},
		{"/ui/pressure/dp-hood" + q, secretIngest, 403, ""},
	} {
		t.Run(c.path+" "+c.token, func(t *testing.T) {
			code, _, b := d.do("GET", c.path, c.token, "", nil)
			if code != c.code || decodeAPIError(t, b).Field != c.field {
				t.Errorf("%d %s, want %d naming %q", code, b, c.code, c.field)
			}
		})
	}
}

// TestCertifyReport certifies stored samples through the page's report
// route: the JSON is the API's classification answer byte for byte; the
// HTML is the report `cleanmon certify --format html` writes for a file of
// the same samples (but for its header), names the JSON's SHA-256, and
// comes with a policy that allows its one style block by hash.
func TestCertifyReport(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	start := time.Now().UTC().Add(-2 * time.Hour).Truncate(time.Minute)
	var csv strings.Builder
	csv.WriteString("location,time,volume_l,0.5um,1um\n")
	for i := 0; i < 5; i++ {
		at := start.Add(time.Duration(i) * time.Minute)
		// ISO 5 at 0.5 µm is 3 520 /m³ (ISO 14644-1:2015 Table 1): 60
		// particles in 28.3 L is 2 120 /m³, within; the fifth sample's
		// 150 (5 300 /m³) lifts the mean to 390 in 141.5 L, 2 756 /m³,
		// still within.
		c05 := uint64(60)
		if i == 4 {
			c05 = 150
		}
		d.post(postedReading{Counter: "pc-hood", Time: rfcTime(at), VolumeL: 28.3, Counts: map[string]uint64{"0.3": 3 * c05, "0.5": c05, "1": 12, "5": 0}})
		fmt.Fprintf(&csv, "hood-1,%s,28.3,%d,12\n", at.Format(time.RFC3339), c05)
	}
	from, to := start.Add(-time.Minute).Format(time.RFC3339), start.Add(10*time.Minute).Format(time.RFC3339)
	q := "zone=hood&from=" + from + "&to=" + to

	code, _, api := d.do("GET", "/api/v1/zones/hood/classification?from="+from+"&to="+to, secretViewer, "", nil)
	if code != 200 {
		t.Fatalf("classification: %d %s", code, api)
	}
	code, h, js := d.do("GET", "/certify/report?"+q+"&format=json", secretViewer, "", nil)
	if code != 200 || !bytes.Equal(js, api) || !strings.HasPrefix(h.Get("Content-Disposition"), `attachment; filename="certification-hood-`) {
		t.Errorf("format=json: %d %q\n%s\nwant the API's answer\n%s", code, h.Get("Content-Disposition"), js, api)
	}

	code, h, html := d.do("GET", "/certify/report?"+q, secretViewer, "", nil)
	if code != 200 || h.Get("Content-Type") != "text/html; charset=utf-8" {
		t.Fatalf("report: %d %q %s", code, h.Get("Content-Type"), html)
	}
	if cd := h.Get("Content-Disposition"); !regexp.MustCompile(`^attachment; filename="certification-hood-\d{8}T\d{4}Z-\d{8}T\d{4}Z\.html"$`).MatchString(cd) {
		t.Errorf("Content-Disposition %q", cd)
	}
	if h.Get("Content-Security-Policy") != reportCSP || !strings.Contains(reportCSP, "default-src 'none'") {
		t.Errorf("policy %q, want %q", h.Get("Content-Security-Policy"), reportCSP)
	}
	m := regexp.MustCompile(`(?s)<style>(.*?)</style>`).FindAllSubmatch(html, -1)
	if len(m) != 1 {
		t.Fatalf("%d style blocks in the report", len(m))
	}
	sum := sha256.Sum256(m[0][1])
	if want := "style-src 'sha256-" + base64.StdEncoding.EncodeToString(sum[:]) + "'"; !strings.Contains(reportCSP, want) {
		t.Errorf("policy %q does not allow the report's style block (%s)", reportCSP, want)
	}
	if bytes.Contains(html, []byte("<script")) {
		t.Error("the report holds a script")
	}
	jsum := sha256.Sum256(api)
	if !bytes.Contains(html, []byte(hex.EncodeToString(jsum[:]))) {
		t.Error("the report does not name the SHA-256 of the classification JSON")
	}

	file := filepath.Join(t.TempDir(), "samples.csv")
	if err := os.WriteFile(file, []byte(csv.String()), 0o600); err != nil {
		t.Fatal(err)
	}
	var out, errOut bytes.Buffer
	exit := runCertify([]string{"--class", "5", "--area", "2", "--sizes", "0.5,1", "--state", "in-operation", "--format", "html", file}, &out, &errOut)
	if exit != exitOK {
		t.Fatalf("certify: exit %d: %s", exit, errOut.String())
	}
	if got, want := uiReportBody(t, html), uiReportBody(t, out.Bytes()); got != want {
		t.Errorf("the stored samples' report differs from certify's:\n%s\nwant\n%s", got, want)
	}
	if !bytes.Contains(html, []byte("PASS")) {
		t.Error("the report lacks the verdict")
	}

	for _, c := range []struct {
		query, token string
		code         int
		field        string
	}{
		{"from=" + from + "&to=" + to, secretViewer, 400, "zone"},
		{"zone=hood&to=" + to, secretViewer, 400, "from"},
		{"zone=hood&from=" + from, secretViewer, 400, "to"},
		{"zone=hood&from=yesterday&to=" + to, secretViewer, 400, "from"},
		{q + "&format=pdf", secretViewer, 400, "format"},
		{"zone=nope&from=" + from + "&to=" + to, secretViewer, 404, ""},
		{"zone=corridor&from=" + from + "&to=" + to, secretViewer, 400, ""},
		{"zone=assembly&from=" + from + "&to=" + to, secretViewer, 422, ""}, // no readings there
		{q, "", 401, ""},
		{q, secretIngest, 403, ""},
	} {
		t.Run(c.query+" "+c.token, func(t *testing.T) {
			code, h, b := d.do("GET", "/certify/report?"+c.query, c.token, "", nil)
			if code != c.code || decodeAPIError(t, b).Field != c.field || !strings.HasPrefix(h.Get("Content-Type"), "application/json") {
				t.Errorf("%d %q %s, want %d naming %q", code, h.Get("Content-Type"), b, c.code, c.field)
			}
		})
	}
}
