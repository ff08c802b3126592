package web

import (
	"bytes"
	"cleanmon/alerts"
	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/collector"
	"cleanmon/store"
	"context"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"path"
	"regexp"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"github.com/go-chi/chi/v5"
)

// 404s, with the zone name escaped.
func TestPageRoutes(t *testing.T) {
	d := newPageServer(t)
	type want struct {
		path, ctype string
		body        []byte
	}
	var cases []want
	for name, page := range map[string]string{"/": "overview.html", "/alarms": "alarms.html", "/certify": "certify.html", "/zones/hood": "zone.html",
		"/alarms/a1/investigation": "investigation.html", "/runs/LOT-1": "run.html", "/zones/hood/trend": "trend.html",
		"/signin": "signin.html", "/accounts": "accounts.html", "/audit": "audit.html"} {
		cases = append(cases, want{name, "text/html; charset=utf-8", webPages[page].body})
	}
	for name, f := range webAssets {
		cases = append(cases, want{"/assets/" + name, contentTypes[path.Ext(name)], f.body})
	}
	sort.Slice(cases, func(i, j int) bool { return cases[i].path < cases[j].path })
	if len(webAssets) < 10 || len(webPages) != 10 {
		t.Fatalf("embedded %d assets and %d pages; want the 10 pages and their scripts, style sheet and icon", len(webAssets), len(webPages))
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
			req := httptest.NewRequest("GET", c.path, nil)
			req.Header.Set("If-None-Match", h.Get("ETag"))
			rec := httptest.NewRecorder()
			d.h.ServeHTTP(rec, req)
			if h.Get("ETag") == "" || rec.Code != http.StatusNotModified {
				t.Errorf("revalidation with ETag %q: %d, want 304", h.Get("ETag"), rec.Code)
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

// the highest of its low sides.
func TestSiteAreas(t *testing.T) {
	demo, err := site.Demo()
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
		// the demo site: hood → assembly, metrology → assembly,
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

// pageServer serves the pages alone over a small site, with fakes of the
// pages' collaborators: no store, no listener.
type pageServer struct {
	t *testing.T
	h http.Handler
}

const pageSite = `site: "Veldmark Photonics, building C"
zones:
  - {id: hood, class: 5, area_m2: 2, sizes: ["0.5"], locations: [{id: h-1}]}
counters:
  - {id: pc-hood, zone: hood, location: h-1, sizes: ["0.5"]}
`

func newPageServer(t *testing.T) *pageServer {
	t.Helper()
	cfg, err := site.Load("site.yaml", []byte(pageSite))
	if err != nil {
		t.Fatal(err)
	}
	auth, err := access.NewAuthorizer(cfg.Access, false)
	if err != nil {
		t.Fatal(err)
	}
	r := chi.NewRouter()
	New(Options{Site: cfg, Store: fakePressure{}, Certify: fakeCertifier{}, Records: fakeRecords{}, Access: auth, Log: slog.New(slog.NewTextHandler(io.Discard, nil)),
		Accounts: noPeople{}, Signatures: noPeople{}, Audit: noPeople{},
		Now: func() time.Time { return time.Date(2026, 3, 2, 12, 0, 0, 0, time.UTC) }}).Register(r)
	return &pageServer{t: t, h: r}
}

// do sends one request; token "" sends none.
func (d *pageServer) do(method, path, token, contentType string, body []byte) (int, http.Header, []byte) {
	req := httptest.NewRequest(method, path, bytes.NewReader(body))
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	rec := httptest.NewRecorder()
	d.h.ServeHTTP(rec, req)
	return rec.Code, rec.Header(), rec.Body.Bytes()
}

type fakePressure struct{}

func (fakePressure) ScanPressure(string, time.Time, time.Time, func(store.Pressure) error) error {
	return nil
}

type fakeCertifier struct{}

func (fakeCertifier) CertifyStored(context.Context, string, string, string) (int, []byte, *classify.Report) {
	return http.StatusNotFound, []byte(`{"error":"no readings"}`), nil
}

// noPeople has no accounts, no signatures and a chain it cannot check:
// the people's routes are tested end to end with the daemon.
type noPeople struct{}

func (noPeople) Accounts() ([]AccountView, error) { return nil, nil }
func (noPeople) ManageAccount(context.Context, string, AccountOp) (string, error) {
	return "", people.ErrNotFound
}
func (noPeople) Sign(context.Context, people.Session, people.SignRequest) (people.Signature, error) {
	return people.Signature{}, people.ErrReauth
}
func (noPeople) SignaturesFor(string) []people.Signature { return nil }
func (noPeople) AuditStatus(context.Context) AuditStatus {
	return AuditStatus{Problems: []string{"not checked"}}
}

// Every page shell is served whole: the shared head and top bar put in
// place of their marker lines, none left behind, the page's own title and
// script kept.
func TestPagesHoldTheSharedParts(t *testing.T) {
	if len(webPages) < 10 {
		t.Fatalf("%d page shells loaded", len(webPages))
	}
	for name, f := range webPages {
		body := string(f.body)
		for _, want := range []string{`<link rel="stylesheet" href="/assets/app.css">`, `<header class="top">`, `id="tz"`, `<title>`, `<script type="module"`} {
			if strings.Count(body, want) != 1 {
				t.Errorf("%s: %q %d times, want once", name, want, strings.Count(body, want))
			}
		}
		if strings.Contains(body, "<!-- shared:") {
			t.Errorf("%s: a shared part was not put in", name)
		}
		if strings.Index(body, `<meta charset="utf-8">`) > 200 {
			t.Errorf("%s: the charset comes late", name)
		}
	}
	if _, err := withSharedParts("pages/x.html", []byte("<!-- shared: head -->\n")); err == nil {
		t.Error("a page without its top bar marker was accepted")
	}
}
