package main

import (
	"bytes"
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"

	"cleanmon/cmd/cleanmon/internal/daemon"
	"cleanmon/cmd/cleanmon/internal/report"
)

// TestTrendFiguresAgainstRawReadings posts readings in two months and
// checks the month's figures against a computation over the same raw
// readings here: the mean, and the 95th and 99th percentiles by gonum's
// empirical quantile (the smallest sample with at least the fraction p at
// or below it, the nearest-rank method), and the samples above each level.
func TestTrendFiguresAgainstRawReadings(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	now := time.Now().UTC().Truncate(time.Minute)
	rng := rand.New(rand.NewPCG(7, 11))
	byMonth := map[string][]float64{}
	var rs []postedReading
	add := func(at time.Time) {
		c05 := uint64(5 + rng.IntN(90)) // 177–3 322 /m³ in 28.3 L: around the hood's levels
		if rng.IntN(20) == 0 {
			c05 += 100 // now and then above the ISO 5 limit
		}
		rs = append(rs, postedReading{Counter: "pc-hood", Time: rfcTime(at), VolumeL: 28.3,
			Counts: map[string]uint64{"0.3": 3 * c05, "0.5": c05, "1": c05 / 5, "5": 0}})
		m := at.Format("2006-01")
		byMonth[m] = append(byMonth[m], float64(c05)/28.3*1000)
	}
	for i := 1; i <= 90; i++ {
		add(now.Add(-time.Duration(i) * time.Minute))
		add(now.Add(-10*24*time.Hour - time.Duration(i)*time.Minute))
	}
	for i := 0; i < len(rs); i += 60 {
		d.post(rs[i:min(i+60, len(rs))]...)
	}
	month := now.Add(-time.Minute).Format("2006-01")
	var tr report.Trend
	d.getJSON("/api/v1/zones/hood/trend?month="+month, &tr)
	if tr.Month != month {
		t.Fatalf("trend of %s, want %s", tr.Month, month)
	}
	prevMonth := tr.PreviousMonth
	checked := 0
	for _, l := range tr.Locations {
		if l.Location != "hood-1" || l.SizeUM != 0.5 {
			continue
		}
		for _, c := range []struct {
			m string
			s report.TrendStats
		}{{month, l.This}, {prevMonth, l.Previous}} {
			raw := slices.Clone(byMonth[c.m])
			slices.Sort(raw)
			if c.s.N != len(raw) {
				t.Fatalf("%s: n %d, want %d", c.m, c.s.N, len(raw))
			}
			if len(raw) == 0 {
				continue
			}
			near := func(name string, got *float64, want float64) {
				if got == nil || math.Abs(*got-want) > 1e-9*want {
					t.Errorf("%s %s: %v, want %v", c.m, name, got, want)
				}
			}
			near("mean", c.s.Mean, stat.Mean(raw, nil))
			near("p95", c.s.P95, stat.Quantile(0.95, stat.Empirical, raw, nil))
			near("p99", c.s.P99, stat.Quantile(0.99, stat.Empirical, raw, nil))
			near("max", c.s.Max, raw[len(raw)-1])
			over := func(level float64) int {
				n := 0
				for _, v := range raw {
					if v > level {
						n++
					}
				}
				return n
			}
			// The hood's levels (alert 1 000, action 2 000) and the ISO 5
			// limit at 0.5 µm, 3 520 /m³ (ISO 14644-1:2015 Table 1).
			if c.s.OverAlert != over(1000) || c.s.OverAction != over(2000) || c.s.OverClass != over(3520) {
				t.Errorf("%s: above alert/action/class %d/%d/%d, want %d/%d/%d", c.m, c.s.OverAlert, c.s.OverAction, c.s.OverClass, over(1000), over(2000), over(3520))
			}
			checked++
		}
	}
	if checked == 0 {
		t.Fatal("no figures of hood-1 at 0.5 µm were checked")
	}
	if len(tr.Charts) == 0 || len(tr.Advice) == 0 || len(tr.DoorsPerDay) < 28 || !strings.Contains(tr.Caution, "does not replace") {
		t.Errorf("trend lacks charts (%d), advice (%d), every day's doors (%d) or the caution", len(tr.Charts), len(tr.Advice), len(tr.DoorsPerDay))
	}

	// The command prints the same month, as text and as PDF.
	t.Setenv("CLEANMON_TOKEN", secretViewer)
	var out, errb bytes.Buffer
	if code := run([]string{"report", "trend", "--zone", "hood", "--month", month, "--url", d.url}, &out, &errb); code != 0 {
		t.Fatalf("report trend: exit %d: %s", code, errb.String())
	}
	raw := slices.Clone(byMonth[month])
	slices.Sort(raw)
	wantMean := report.GroupDigits(math.Round(stat.Mean(raw, nil)*10) / 10)
	if !strings.Contains(out.String(), "mean "+wantMean) || !strings.Contains(out.String(), "Reviewed by") {
		t.Errorf("report trend text lacks the mean %s or the signature line:\n%s", wantMean, out.String())
	}
	pdf := filepath.Join(t.TempDir(), "trend.pdf")
	if code := run([]string{"report", "trend", "--zone", "hood", "--month", month, "--url", d.url, "--format", "pdf", "--out", pdf}, &out, &errb); code != 0 {
		t.Fatalf("report trend pdf: exit %d: %s", code, errb.String())
	}
	b, _ := os.ReadFile(pdf)
	if !bytes.HasPrefix(b, []byte("%PDF-")) {
		t.Fatalf("not a PDF: %.20q", b)
	}
	if code := run([]string{"report", "trend", "--zone", "hood", "--month", "March", "--url", d.url}, &out, &errb); code != 2 {
		t.Errorf("--month March: exit %d, want 2", code)
	}
	if _, err := exec.LookPath("pdftotext"); err == nil {
		txt, err := exec.Command("pdftotext", pdf, "-").Output()
		if err != nil || !bytes.Contains(txt, []byte("Reviewed by")) || !bytes.Contains(txt, []byte("does not replace")) {
			t.Errorf("pdftotext: %v; text lacks the signature block or the caution:\n%s", err, txt)
		}
	}
	// The exposure and trend reports as the pages serve them.
	code, h, body := d.do("GET", "/zones/hood/trend/report?format=html&month="+month, secretViewer, "", nil)
	if code != 200 || !strings.Contains(h.Get("Content-Security-Policy"), "default-src 'none'") || !bytes.Contains(body, []byte("Environmental monitoring trend")) {
		t.Errorf("trend HTML report: %d %s", code, h.Get("Content-Security-Policy"))
	}
	var js json.RawMessage
	d.getJSON("/api/v1/zones/hood/trend", &js) // the default month answers too
}

// TestMonthlyTrendFiles: with reports.trend_dir set, the daemon writes
// each zone's last month there at start, as HTML and PDF.
func TestMonthlyTrendFiles(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "trends")
	d := startSite(t, apiSite(false)+"reports:\n  trend_dir: "+dir+"\n", "")
	n := time.Now().UTC()
	month := time.Date(n.Year(), n.Month(), 1, 0, 0, 0, 0, time.UTC).AddDate(0, -1, 0).Format("2006-01")
	want := []string{"trend-assembly-" + month + ".html", "trend-assembly-" + month + ".pdf", "trend-hood-" + month + ".pdf", "trend-fill-" + month + ".pdf"}
	waitFor(t, 30*time.Second, "the monthly trend files", func() bool {
		for _, f := range want {
			if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
				return false
			}
		}
		return true
	})
	b, _ := os.ReadFile(filepath.Join(dir, want[1]))
	if !bytes.HasPrefix(b, []byte("%PDF-")) {
		t.Errorf("%s is not a PDF", want[1])
	}
	if _, err := os.Stat(filepath.Join(dir, "trend-corridor-"+month+".pdf")); err == nil {
		t.Error("a trend was written for the corridor, which has no location")
	}
	if !strings.Contains(d.stderr.String(), "monthly trend reports written") {
		t.Error("the daemon did not log the monthly reports")
	}
}

// TestReportTrendFromStore: with --data and --config the month comes from
// a store no daemon holds, and a store a daemon holds is refused.
func TestReportTrendFromStore(t *testing.T) {
	cfg := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(cfg, []byte(apiSite(false)), 0o600); err != nil {
		t.Fatal(err)
	}
	data := t.TempDir()
	d := startTestDaemon(t, daemon.Options{ConfigPath: cfg, DataDir: data})
	// Seven samples from noon of yesterday: one month, whatever today is.
	y := time.Now().UTC().AddDate(0, 0, -1)
	noon := time.Date(y.Year(), y.Month(), y.Day(), 12, 0, 0, 0, time.UTC)
	var rs []postedReading
	for i := 1; i <= 7; i++ {
		rs = append(rs, postedReading{Counter: "pc-hood", Time: rfcTime(noon.Add(time.Duration(i) * time.Minute)), VolumeL: 28.3,
			Counts: map[string]uint64{"0.3": 30, "0.5": 10, "1": 2, "5": 0}})
	}
	d.post(rs...)
	month := noon.Format("2006-01")
	var out, errb bytes.Buffer
	if code := run([]string{"report", "trend", "--zone", "hood", "--month", month, "--data", data, "--config", cfg}, &out, &errb); code != 1 || !strings.Contains(errb.String(), "use --url") {
		t.Errorf("report trend on a store the daemon holds: exit %d: %s", code, errb.String())
	}
	if code := d.stop(); code != 0 {
		t.Fatalf("daemon exit %d", code)
	}
	out.Reset()
	errb.Reset()
	if code := run([]string{"report", "trend", "--zone", "hood", "--month", month, "--data", data, "--config", cfg}, &out, &errb); code != 0 {
		t.Fatalf("report trend --data: exit %d: %s", code, errb.String())
	}
	// 10 particles in 28.3 L, every sample: 353.4 /m³, printed whole.
	if !strings.Contains(out.String(), "n 7, mean 353, p95 353") {
		t.Errorf("report trend --data lacks n 7 and the mean 353 /m³:\n%s", out.String())
	}
}
