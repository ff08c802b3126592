package main

import (
	"bytes"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/cmd/cleanmon/internal/web"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"regexp"
	"strings"
	"testing"
	"time"
)

// TestPageRoutes serves every page and every embedded asset through the
// real daemon: each with the strict policy and the other security
// headers, its content type and its embedded bytes, revalidated by ETag,
// and answering HEAD; a zone that does not exist and a missing asset are
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
				var s access.Session
				if err := json.Unmarshal(b, &s); err != nil {
					t.Fatal(err)
				}
				want := access.Session{OpenReads: open, SignedIn: c.name != "", Name: c.name, Role: c.role, MayRead: c.mayRead, MayOperate: c.mayOperat,
					MayAdmin: c.role == "admin", MaySign: []string{}}
				if !reflect.DeepEqual(s, want) {
					t.Errorf("%+v, want %+v", s, want)
				}
			})
		}
	}
}

// TestSiteAreas orders the pressure cascade: an area is one step above
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
			var got web.DPHistory
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
	if h.Get("Content-Security-Policy") != report.CSP || !strings.Contains(report.CSP, "default-src 'none'") {
		t.Errorf("policy %q, want %q", h.Get("Content-Security-Policy"), report.CSP)
	}
	m := regexp.MustCompile(`(?s)<style>(.*?)</style>`).FindAllSubmatch(html, -1)
	if len(m) != 1 {
		t.Fatalf("%d style blocks in the report", len(m))
	}
	sum := sha256.Sum256(m[0][1])
	if want := "style-src 'sha256-" + base64.StdEncoding.EncodeToString(sum[:]) + "'"; !strings.Contains(report.CSP, want) {
		t.Errorf("policy %q does not allow the report's style block (%s)", report.CSP, want)
	}
	if bytes.Contains(html, []byte("<script")) {
		t.Error("the report holds a script")
	}
	code, h, pdf := d.do("GET", "/certify/report?"+q+"&format=pdf", secretViewer, "", nil)
	if code != 200 || h.Get("Content-Type") != "application/pdf" || !bytes.HasPrefix(pdf, []byte("%PDF-")) || !strings.HasSuffix(h.Get("Content-Disposition"), `.pdf"`) {
		t.Errorf("format=pdf: %d %q %q", code, h.Get("Content-Type"), h.Get("Content-Disposition"))
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
		{q + "&format=docx", secretViewer, 400, "format"},
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
