package main

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/url"
	"os"
	"strings"
	"time"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/api"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/store"
)

// runReport dispatches `cleanmon report <kind>`; trend is the one kind.
func runReport(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] != "trend" {
		if len(args) > 0 && (args[0] == "-h" || args[0] == "--help") {
			fmt.Fprintln(stdout, "usage: cleanmon report trend --zone Z --month YYYY-MM (--url URL | --data DIR --config FILE) [--format text|html|pdf] [--out FILE]")
			return exitOK
		}
		fmt.Fprintln(stderr, "cleanmon report: want `cleanmon report trend ...` (see cleanmon report trend -h)")
		return exitUsage
	}
	return runReportTrend(args[1:], stdout, stderr)
}

// runReportTrend prints a zone's month on one page, from a running daemon
// (--url, GET /api/v1/zones/{zone}/trend) or from a store no daemon holds
// (--data with the site's --config).
func runReportTrend(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("report trend", "--zone Z --month YYYY-MM (--url URL | --data DIR --config FILE) [--format text|html|pdf] [--out FILE]", stderr)
	zone := fs.String("zone", "", "zone id")
	month := fs.String("month", "", "month, e.g. 2026-03 (default: the month before this one)")
	base := fs.String("url", "", "base URL of a running daemon, e.g. http://127.0.0.1:8080")
	tokenFile := fs.String("token-file", "", "file holding a viewer token for --url (else $CLEANMON_TOKEN)")
	data := fs.String("data", "", "data directory of a store that no daemon holds")
	config := fs.String("config", "", "site configuration, with --data")
	format := fs.String("format", "text", "text, html or pdf")
	out := fs.String("out", "", "file to write (default standard output)")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	switch {
	case len(pos) > 0:
		return fail(stderr, "report trend", fmt.Errorf("unexpected argument %q", pos[0]))
	case *zone == "":
		return fail(stderr, "report trend", errors.New("--zone is required"))
	case (*data == "") == (*base == ""):
		return fail(stderr, "report trend", errors.New("give exactly one of --url or --data"))
	case *data != "" && *config == "":
		return fail(stderr, "report trend", errors.New("--data needs the site's --config"))
	case *format != "text" && *format != "html" && *format != "pdf":
		return fail(stderr, "report trend", fmt.Errorf("--format %q: want text, html or pdf", *format))
	}
	if _, err := api.ParseMonth(*month, time.Now()); err != nil {
		return fail(stderr, "report trend", fmt.Errorf("--month: %q is not a month such as 2026-03", *month))
	}
	var status int
	var body []byte
	if *base != "" {
		token, err := readToken(*tokenFile)
		if err != nil {
			return fail(stderr, "report trend", err)
		}
		status, body, err = fetchTrend(*base, token, *zone, *month)
		if err != nil {
			fmt.Fprintf(stderr, "cleanmon report trend: %s\n", oneLine(err.Error()))
			return exitFail
		}
	} else {
		var code int
		status, body, code = storedTrend(*data, *config, *zone, *month, stderr)
		if code != exitOK {
			return code
		}
	}
	if status != http.StatusOK {
		var e struct{ Error string }
		json.Unmarshal(body, &e)
		fmt.Fprintf(stderr, "cleanmon report trend: %d: %s\n", status, oneLine(e.Error))
		if status == http.StatusBadRequest || status == http.StatusNotFound {
			return exitUsage
		}
		return exitFail
	}
	var t report.Trend
	if err := json.Unmarshal(body, &t); err != nil {
		fmt.Fprintf(stderr, "cleanmon report trend: the answer is not a trend: %v\n", err)
		return exitFail
	}
	var b bytes.Buffer
	switch *format {
	case "html":
		err = report.WriteTrendHTML(&b, t)
	case "pdf":
		err = report.WriteTrendPDF(&b, t)
	default:
		err = report.WriteTrendText(&b, t)
	}
	if err == nil {
		if *out == "" {
			_, err = stdout.Write(b.Bytes())
		} else {
			err = os.WriteFile(*out, b.Bytes(), 0o644)
		}
	}
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon report trend: %s\n", oneLine(err.Error()))
		return exitFail
	}
	return exitOK
}

func fetchTrend(base, token, zone, month string) (int, []byte, error) {
	u := strings.TrimRight(base, "/") + "/api/v1/zones/" + url.PathEscape(zone) + "/trend?month=" + url.QueryEscape(month)
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, u, nil)
	if err != nil {
		return 0, nil, err
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return 0, nil, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(io.LimitReader(resp.Body, 64<<20))
	return resp.StatusCode, b, err
}

// storedTrend computes the month from a store directly, with the API's
// own code over the site's configuration: no daemon, so no open alarms
// but those in the journal.
func storedTrend(data, config, zone, month string, stderr io.Writer) (int, []byte, int) {
	cfg, err := site.LoadFile(config)
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon report trend: %s\n", oneLine(err.Error()))
		return 0, nil, exitUsage
	}
	st, err := store.Open(data, store.Options{})
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon report trend: %s\n", oneLine(err.Error()))
		if errors.Is(err, store.ErrLocked) {
			fmt.Fprintln(stderr, "cleanmon report trend: a daemon holds this store; use --url")
		}
		return 0, nil, exitFail
	}
	defer st.Close()
	zones, err := alerts.NewZoneTracker(cfg.Zones, cfg.Bindings(), alerts.ZoneTrackerOptions{Now: time.Now})
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon report trend: %s\n", oneLine(err.Error()))
		return 0, nil, exitUsage
	}
	srv := api.New(api.Options{Site: cfg, Zones: zones, Store: st, Ingest: api.NoIngest{}, Alarms: api.NoAlarms{},
		Log: slog.New(slog.NewTextHandler(io.Discard, nil)), Now: time.Now})
	status, body := srv.TrendJSON(context.Background(), zone, month)
	return status, body, exitOK
}
