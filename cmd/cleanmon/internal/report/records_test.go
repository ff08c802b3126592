package report

import (
	"bytes"
	"os/exec"
	"strings"
	"testing"
	"time"
)

func exampleExposure() Exposure {
	start := time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)
	end := start.Add(8 * time.Hour)
	size := 0.5
	cleared := start.Add(3*time.Hour + 20*time.Minute)
	return Exposure{
		Site: "Veldmark Photonics, building C", ZoneName: "Assembly hall", Target: "ISO 7",
		Run:   Run{ID: "LH7-0412", Zone: "assembly", Start: start, End: &end, Product: "laser head LH-7", Lot: "0412", RecordedBy: "mes-gateway"},
		Until: end, Generated: end.Add(time.Hour),
		Alarms: []ExposureAlarm{
			{ID: "assembly:asm-2:0.5:excursion:20260302T090000Z", Kind: "excursion", Level: "action", Location: "asm-2", SizeUM: &size,
				Since: start.Add(3 * time.Hour), Cleared: &cleared, Peak: 412000, PeakTime: start.Add(3*time.Hour + 4*time.Minute), Excursion: true},
		},
		Excursions:  1,
		TimeByLevel: map[string]float64{"none": 7 * 3600, "action": 1200, "unknown": 1200},
		Peaks:       []Peak{{SizeUM: 0.5, Location: "asm-2", PerM3: 412000, Time: start.Add(3*time.Hour + 4*time.Minute)}},
		Caution:     "cleanmon supports, and does not replace, the site's qualified people.",
	}
}

// TestExposureReports: every form names the run, the alarm it overlapped
// with its peak, the time by level, and carries the caution and the
// signature block.
func TestExposureReports(t *testing.T) {
	e := exampleExposure()
	var txt, html, pdf bytes.Buffer
	if err := WriteExposureText(&txt, e); err != nil {
		t.Fatal(err)
	}
	if err := WriteExposureHTML(&html, e); err != nil {
		t.Fatal(err)
	}
	if err := WriteExposurePDF(&pdf, e); err != nil {
		t.Fatal(err)
	}
	for name, got := range map[string]string{"text": txt.String(), "html": html.String()} {
		for _, want := range []string{"LH7-0412", "assembly:asm-2:0.5:excursion:20260302T090000Z", "412 000", "Reviewed by (QA)", "qualified people, its procedures", "none", "action"} {
			if !strings.Contains(got, want) {
				t.Errorf("%s exposure lacks %q", name, want)
			}
		}
	}
	if !strings.Contains(ExposureCSP, "sha256-") || strings.Contains(html.String(), "<script") {
		t.Errorf("HTML exposure: policy %q, or a script in the document", ExposureCSP)
	}
	if !bytes.HasPrefix(pdf.Bytes(), []byte("%PDF-")) {
		t.Fatalf("not a PDF")
	}
	// The time by level: 7 h of 7 h 40 min is 91.3 %.
	if !strings.Contains(txt.String(), "91.3 %") {
		t.Errorf("text exposure lacks the share 91.3 %% of none:\n%s", txt.String())
	}
	if p, err := exec.LookPath("pdftotext"); err == nil {
		cmd := exec.Command(p, "-", "-")
		cmd.Stdin = bytes.NewReader(pdf.Bytes())
		out, err := cmd.Output()
		if err != nil || !bytes.Contains(out, []byte("LH7-0412")) || !bytes.Contains(out, []byte("Reviewed by (QA)")) || !bytes.Contains(out, []byte("412 000")) {
			t.Errorf("pdftotext: %v:\n%s", err, out)
		}
	} else {
		t.Log("pdftotext not found (Debian poppler-utils): the PDF's text was not read back")
	}
}

// TestLevelRowsKeepUnknown: a level with time is never dropped, unknown
// ones included, and the shares add to one.
func TestLevelRowsKeepUnknown(t *testing.T) {
	rows := LevelRows(map[string]float64{"none": 30, "unknown": 10, "weird": 60})
	sum := 0.0
	var names []string
	for _, r := range rows {
		sum += r.Share
		names = append(names, r.Level)
	}
	if strings.Join(names, ",") != "none,unknown,weird" || sum < 0.999 || sum > 1.001 {
		t.Errorf("rows %v, shares sum %g", names, sum)
	}
}
