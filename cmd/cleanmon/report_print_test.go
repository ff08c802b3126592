package main

import (
	"context"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/cdproto/page"
	"github.com/chromedp/chromedp"
)

// TestCertifyHTMLPrintsOnA4 prints the HTML report with a real Chromium,
// as a certifier would from the browser, and reads the printout back with
// poppler: A4 sheets, the report identifier and "page x/y" on each, and
// no section heading left alone at the foot of a page.
func TestCertifyHTMLPrintsOnA4(t *testing.T) {
	totext, info := outsideTool(t, "pdftotext", "poppler-utils"), outsideTool(t, "pdfinfo", "poppler-utils")
	b := newBrowser(t)
	dir := t.TempDir()
	html := filepath.Join(dir, "report.html")
	code, _, errs := runCLI(t, "certify", "--class", "7", "--area", "60", "--sizes", "0.5,5", "--state", "in-operation", "--zone", "assembly",
		"--length", "10", "--width", "6", "--date", "2026-03-03", "--format", "html", "--out", html, filepath.Join(repo, "testdata", "samples-assembly.csv"))
	if code != 1 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	doc, err := os.ReadFile(html)
	if err != nil {
		t.Fatal(err)
	}
	id := regexp.MustCompile(`CM-[0-9A-F]{12}`).Find(doc)
	b.open("file://"+html, `document.readyState === "complete"`)
	ctx, cancel := context.WithTimeout(b.ctx, 60*time.Second)
	defer cancel()
	pdf, err := chromedp.Run(ctx, chromedp.PrintToPDF(chromedp.PDFPaper(chromedp.PaperA4),
		func(p *page.PrintToPDFParams) { v := true; p.PreferCSSPageSize = &v }))
	if err != nil {
		t.Fatalf("printing: %v", err)
	}
	out := filepath.Join(dir, "report.pdf")
	if err := os.WriteFile(out, pdf, 0o600); err != nil {
		t.Fatal(err)
	}
	meta, err := exec.Command(info, out).Output()
	if err != nil {
		t.Fatal(err)
	}
	// A4 is 210 mm × 297 mm, 595 × 842 pt (ISO 216).
	ps := regexp.MustCompile(`Page size:\s+([\d.]+) x ([\d.]+)`).FindSubmatch(meta)
	if ps == nil {
		t.Fatalf("no page size:\n%s", meta)
	}
	w, _ := strconv.ParseFloat(string(ps[1]), 64)
	h, _ := strconv.ParseFloat(string(ps[2]), 64)
	if math.Abs(w-595.28) > 1.5 || math.Abs(h-841.89) > 1.5 {
		t.Errorf("page %v × %v pt, not A4:\n%s", w, h, meta)
	}
	m := regexp.MustCompile(`(?m)^Pages:\s+(\d+)`).FindSubmatch(meta)
	if m == nil {
		t.Fatalf("no page count:\n%s", meta)
	}
	pages, _ := strconv.Atoi(string(m[1]))
	txt, err := exec.Command(totext, "-layout", out, "-").Output()
	if err != nil {
		t.Fatal(err)
	}
	sheets := strings.Split(strings.TrimRight(string(txt), "\f\n"), "\f")
	if len(sheets) != pages || pages < 2 {
		t.Fatalf("pdfinfo %d pages, pdftotext %d", pages, len(sheets))
	}
	headings := []string{"Result", "Problems", "Summary by location", "Location map", "Location means against the limit", "Instruments", "Appendix: every sample"}
	for i, s := range sheets {
		if !strings.Contains(s, "page "+strconv.Itoa(i+1)+"/"+strconv.Itoa(pages)) || !strings.Contains(s, string(id)) {
			t.Errorf("page %d lacks its number or the identifier %s:\n%s", i+1, id, s)
		}
		var lines []string
		for _, l := range strings.Split(s, "\n") {
			if l = strings.TrimSpace(l); l != "" && !strings.Contains(l, string(id)) && !strings.HasPrefix(l, "page ") {
				lines = append(lines, l)
			}
		}
		if len(lines) == 0 {
			continue
		}
		for _, h := range headings {
			if lines[len(lines)-1] == h {
				t.Errorf("page %d ends with the heading %q", i+1, h)
			}
		}
	}
}
