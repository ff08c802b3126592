package main

import (
	"encoding/json"
	"fmt"
	"net/http"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

type dashPanel struct {
	Title   string      `json:"title"`
	Panels  []dashPanel `json:"panels"`
	Targets []struct {
		Expr         string `json:"expr"`
		LegendFormat string `json:"legendFormat"`
	} `json:"targets"`
}

// TestDashboardTellsSuitesApart runs two demo daemons as two suites, a
// real Prometheus scraping both (each target labelled with its suite, as
// federation from the suites' own Prometheus labels them), and every query
// of the Grafana dashboard with its variables at "All": no query fails,
// the per-instrument and per-zone panels show both suites, every series
// carries the suite and instance its legend names, and the rate panel has
// data at the rate interval Grafana gives a 1 s scrape.
func TestDashboardTellsSuitesApart(t *testing.T) {
	promBin := outsideTool(t, "prometheus", "prometheus")
	c := startDaemon(t, "--demo")
	d := startDaemon(t, "--demo")
	promAddr := freeAddr(t)
	dir := t.TempDir()
	host := func(u string) string { return strings.TrimPrefix(u, "http://") }
	cfg := fmt.Sprintf(`global: {scrape_interval: 1s, evaluation_interval: 1s}
scrape_configs:
  - job_name: cleanmon
    static_configs:
      - targets: [%q]
        labels: {suite: building-c}
      - targets: [%q]
        labels: {suite: building-d}
`, host(c.url), host(d.url))
	if err := os.WriteFile(filepath.Join(dir, "prometheus.yml"), []byte(cfg), 0o600); err != nil {
		t.Fatal(err)
	}
	startTool(t, "http://"+promAddr+"/-/ready", promBin, "--config.file="+filepath.Join(dir, "prometheus.yml"),
		"--storage.tsdb.path="+filepath.Join(dir, "data"), "--web.listen-address="+promAddr)
	query := func(q string) ([]map[string]string, error) {
		resp, err := http.Get("http://" + promAddr + "/api/v1/query?query=" + url.QueryEscape(q))
		if err != nil {
			return nil, err
		}
		defer resp.Body.Close()
		var body struct {
			Status string `json:"status"`
			Error  string `json:"error"`
			Data   struct {
				Result []struct {
					Metric map[string]string `json:"metric"`
				} `json:"result"`
			} `json:"data"`
		}
		if err := json.NewDecoder(resp.Body).Decode(&body); err != nil {
			return nil, err
		}
		if body.Status != "success" {
			return nil, fmt.Errorf("%s", body.Error)
		}
		out := make([]map[string]string, len(body.Data.Result))
		for i, r := range body.Data.Result {
			out[i] = r.Metric
		}
		return out, nil
	}
	// Enough scrapes of both, with readings in between, for a rate.
	waitUntil(t, "both suites scraped with readings", 90*time.Second, func() bool {
		r, err := query(`count by (suite) (rate(cleanmon_readings_total[10s]) > 0)`)
		return err == nil && len(r) == 2
	})

	raw, err := os.ReadFile("../../deploy/grafana/cleanmon-dashboard.json")
	if err != nil {
		t.Fatal(err)
	}
	var dash struct {
		Panels []dashPanel `json:"panels"`
	}
	if err := json.Unmarshal(raw, &dash); err != nil {
		t.Fatal(err)
	}
	// Grafana's $__rate_interval at a 1 s scrape interval: 4 × 1 s, and at
	// least the query step plus the scrape interval.
	vars := strings.NewReplacer("$__rate_interval", "10s", "$suite", ".*", "$instance", ".+", "$zone", ".+")
	bothSuites := 0
	var walk func([]dashPanel)
	walk = func(ps []dashPanel) {
		for _, p := range ps {
			walk(p.Panels)
			for _, tg := range p.Targets {
				res, err := query(vars.Replace(tg.Expr))
				if err != nil {
					t.Errorf("%s: %v\n%s", p.Title, err, tg.Expr)
					continue
				}
				suites := map[string]bool{}
				for _, m := range res {
					suites[m["suite"]] = true
					if strings.Contains(tg.LegendFormat, "{{instance}}") && m["instance"] == "" {
						t.Errorf("%s: a series without the instance its legend names: %v", p.Title, m)
					}
				}
				if strings.Contains(tg.LegendFormat, "{{suite}}") && len(res) > 0 && (suites[""] || len(suites) != 2) {
					t.Errorf("%s: suites %v in %d series, want building-c and building-d, each named: %s", p.Title, suites, len(res), tg.Expr)
				}
				if suites["building-c"] && suites["building-d"] {
					bothSuites++
				}
				if strings.Contains(tg.Expr, "rate(") && strings.Contains(tg.Expr, "cleanmon_readings_total") && len(res) == 0 {
					t.Errorf("%s: the rate panel is empty at a 1 s scrape", p.Title)
				}
			}
		}
	}
	walk(dash.Panels)
	if bothSuites < 6 {
		t.Errorf("only %d queries show both suites", bothSuites)
	}
}
