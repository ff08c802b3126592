package report

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"os"
	"os/exec"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"cleanmon/classify"
)

// fixture is a small invented certification of the demo site: an ISO 7
// zone of 60 m² (12 locations, ISO 14644-1:2015 Table A.1) at 0.5 and
// 5 µm, each location sampled once for a minute by one of two counters,
// one of which is past its calibration for the later samples.
func fixture(t *testing.T, sequential bool) (classify.Target, Certification) {
	t.Helper()
	tg := classify.Target{Class: 7, State: classify.InOperation, Sizes: []float64{0.5, 5}, AreaM2: 60}
	start := time.Date(2026, 3, 3, 8, 0, 0, 0, time.UTC)
	var samples []classify.Sample
	for i := range 12 {
		x, y := float64(i%4)*2.5+1.25, float64(i/4)*2+1
		counter := "pc-07"
		if i >= 6 {
			counter = "pc-08"
		}
		samples = append(samples, classify.Sample{
			Location: "A" + strconv.Itoa(10+i), Time: start.Add(time.Duration(i) * 3 * time.Minute), VolumeL: 28.3, DurationS: 60,
			Counts: []uint64{uint64(2000 + 100*i), uint64(10 + i)}, Counter: counter, XM: &x, YM: &y,
			Ref: "s.csv line " + strconv.Itoa(i+2), SampleID: "1",
		})
	}
	ins := []classify.Instrument{
		{ID: "pc-07", Model: "VP-2830", Serial: "VPC-10472", CalibrationDue: time.Date(2026, 9, 30, 0, 0, 0, 0, time.UTC)},
		{ID: "pc-08", Model: "VP-2830", Serial: "VPC-10473", CalibrationDue: time.Date(2026, 2, 28, 0, 0, 0, 0, time.UTC)},
	}
	rep, err := classify.CertifyWith(tg, samples, classify.Options{Instruments: ins, Sequential: sequential})
	if err != nil {
		t.Fatal(err)
	}
	return tg, Certification{Report: rep, Site: "Veldmark Photonics, building C", Zone: "assembly", Date: "2026-03-04",
		Organisation: "Veldmark Photonics QA", Operator: "Q. Example", SamplesFile: "s.csv", SamplesSHA256: "00ff",
		Room: &Room{LengthM: 10, WidthM: 6}}
}

func TestIDIsTheJSONDigest(t *testing.T) {
	_, o := fixture(t, false)
	b, err := JSON(o)
	if err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256(b)
	id, _ := ID(o)
	if want := "CM-" + strings.ToUpper(hex.EncodeToString(sum[:])[:12]); id != want {
		t.Errorf("ID %s, want %s", id, want)
	}
	o.Locations[0].SampleResults[0].Counts["0.5"]++
	if id2, _ := ID(o); id2 == id {
		t.Error("a changed count left the identifier unchanged")
	}
	o.Locations[0].SampleResults[0].Counts["0.5"]--
	o.Signatures = []Signature{{Meaning: "approved", FullName: "Q. Example"}}
	if id3, _ := ID(o); id3 != id {
		t.Error("a signature changed the identifier it signs")
	}
}

// What ISO 14644-1:2015 clause 5 asks of a test report (from memory), in
// every format: each must carry these.
func reportMust(o Certification, id string) []string {
	return []string{
		id, "ISO Class 7; in operation; 0.5 µm, 5 µm", "ISO 14644-1:2015", "Veldmark Photonics QA", "Q. Example",
		"2026-03-03 08:00", "2026-03-03 08:33", "VPC-10473", "2026-02-28", "PAST DUE", "informative",
		"supports, and does not replace, the site's qualified people, its procedures and the applicable standards and regulations",
		"Performed by", "Approved by", "A21", "2026-03-03 08:33:00", "pc-08",
	}
}

func TestTextCarriesTheReport(t *testing.T) {
	tg, o := fixture(t, false)
	var b bytes.Buffer
	if err := WriteText(&b, tg, o); err != nil {
		t.Fatal(err)
	}
	id, _ := ID(o)
	for _, want := range reportMust(o, id) {
		if !strings.Contains(b.String(), want) {
			t.Errorf("text report lacks %q", want)
		}
	}
	// The counter past its calibration is a departure, and keeps the zone
	// from passing.
	if o.Verdict != classify.Incomplete || len(o.Departures) == 0 || !strings.Contains(b.String(), "Verdict: INCOMPLETE") {
		t.Errorf("verdict %s, departures %v", o.Verdict, o.Departures)
	}
}

func TestCalibrationStatus(t *testing.T) {
	due := time.Date(2026, 2, 28, 0, 0, 0, 0, time.UTC)
	in := classify.Instrument{ID: "pc", CalibrationDue: due}
	for _, tc := range []struct {
		at   []time.Time
		want string
	}{
		{nil, "no sample drawn with it"},
		{[]time.Time{due.Add(23 * time.Hour)}, "valid on every sampling date"}, // the due date is the last valid day
		{[]time.Time{due.Add(24 * time.Hour), due}, "PAST DUE for 1 of 2 samples"},
		{[]time.Time{{}}, "UNKNOWN: 1 samples without a time"},
	} {
		if got := calibrationStatus(in, tc.at); got != tc.want {
			t.Errorf("%v: %q, want %q", tc.at, got, tc.want)
		}
	}
	rows, why := instrumentRows(classify.Report{Locations: []classify.LocationResult{{SampleResults: []classify.SampleResult{{Counter: "pc-9"}}}}})
	if why == "" || len(rows) != 1 || !strings.HasPrefix(rows[0].Status, "UNKNOWN") {
		t.Errorf("without a list: %v %q", rows, why)
	}
}

func TestHTMLPrintsOnA4(t *testing.T) {
	tg, o := fixture(t, true)
	var b bytes.Buffer
	if err := WriteHTML(&b, tg, o); err != nil {
		t.Fatal(err)
	}
	h := b.String()
	id, _ := ID(o)
	for _, want := range append(reportMust(o, id),
		"@page{size:A4", `counter(page) "/" counter(pages)`, "h1,h2,h3{break-after:avoid;page-break-after:avoid}",
		"thead{display:table-header-group}", `aria-label="map of the sampling locations"`, "Sequential sampling") {
		if !strings.Contains(h, strings.ReplaceAll(want, "'", "&#39;")) {
			t.Errorf("HTML report lacks %q", want)
		}
	}
	if strings.Contains(h, "<script") {
		t.Error("the report carries a script")
	}
	// One mark per location on the map: the 12 locations have coordinates.
	_, mapSVG, _ := strings.Cut(h, `aria-label="map of the sampling locations"`)
	mapSVG, _, _ = strings.Cut(mapSVG, "</svg>")
	if n := strings.Count(mapSVG, "<title>"); n != 12 {
		t.Errorf("%d locations on the map, want 12", n)
	}
	if !strings.Contains(CSP, styleHashes(h)) {
		t.Errorf("the CSP %s does not allow the rendered style block", CSP)
	}
}

func TestSignatureSeam(t *testing.T) {
	tg, o := fixture(t, false)
	o.Signatures = []Signature{{Meaning: "approved", FullName: "Q. Example", UserName: "qe", Method: "password",
		Time: time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC), SHA256: "abc"}}
	var b bytes.Buffer
	if err := WriteText(&b, tg, o); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), "Approved by: Q. Example (qe), signed electronically 2026-03-04 09:00:00 UTC") ||
		!strings.Contains(b.String(), "Performed by  (name, signature, date): ____") {
		t.Errorf("signature block:\n%s", b.String())
	}
}

// pdfTool finds a poppler tool, skipping when it is missing unless
// CLEANMON_REQUIRE_TOOLS is set.
func pdfTool(t *testing.T, name string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatalf("%s not on PATH (Debian package poppler-utils) and CLEANMON_REQUIRE_TOOLS is set", name)
		}
		t.Skipf("%s not on PATH (apt-get install poppler-utils): the PDF was not read back", name)
	}
	return p
}

// PDFText reads a PDF back with poppler's pdftotext (an implementation
// outside the project) and its page count with pdfinfo.
func pdfText(t *testing.T, pdf []byte) (string, int) {
	t.Helper()
	totext, info := pdfTool(t, "pdftotext"), pdfTool(t, "pdfinfo")
	f := t.TempDir() + "/r.pdf"
	if err := os.WriteFile(f, pdf, 0o600); err != nil {
		t.Fatal(err)
	}
	txt, err := exec.Command(totext, "-layout", f, "-").Output()
	if err != nil {
		t.Fatalf("pdftotext: %v", err)
	}
	out, err := exec.Command(info, f).Output()
	if err != nil {
		t.Fatalf("pdfinfo: %v", err)
	}
	m := regexp.MustCompile(`(?m)^Pages:\s+(\d+)`).FindSubmatch(out)
	if m == nil {
		t.Fatalf("pdfinfo gave no page count:\n%s", out)
	}
	n, _ := strconv.Atoi(string(m[1]))
	return string(txt), n
}

func TestPDFReadsBack(t *testing.T) {
	tg, o := fixture(t, false)
	var b bytes.Buffer
	if err := WritePDF(&b, tg, o); err != nil {
		t.Fatal(err)
	}
	txt, pages := pdfText(t, b.Bytes())
	id, _ := ID(o)
	flat := strings.Join(strings.Fields(txt), " ")
	for _, want := range reportMust(o, id) {
		if !strings.Contains(flat, strings.Join(strings.Fields(want), " ")) {
			t.Errorf("PDF text lacks %q", want)
		}
	}
	// Every page carries the identifier and "page x/y".
	sheets := strings.Split(strings.TrimRight(txt, "\f\n"), "\f")
	if len(sheets) != pages || pages < 2 {
		t.Fatalf("pdfinfo says %d pages, pdftotext gave %d", pages, len(sheets))
	}
	for i, s := range sheets {
		if !strings.Contains(s, "page "+strconv.Itoa(i+1)+"/"+strconv.Itoa(pages)) || !strings.Contains(s, id) {
			t.Errorf("page %d lacks its number or the identifier:\n%s", i+1, s)
		}
	}
	// No heading stranded at a page foot: the last text line of a page is
	// never one of the section headings.
	for i, s := range sheets {
		lines := nonEmpty(s)
		if len(lines) < 2 {
			continue
		}
		last := lines[len(lines)-2] // the line above the footer
		for _, h := range []string{"Summary by location", "Location map", "Instruments", "Appendix: every sample", "Result"} {
			if strings.TrimSpace(last) == h {
				t.Errorf("page %d ends with the heading %q", i+1, h)
			}
		}
	}
}

func nonEmpty(s string) []string {
	var out []string
	for _, l := range strings.Split(s, "\n") {
		if strings.TrimSpace(l) != "" {
			out = append(out, l)
		}
	}
	return out
}
