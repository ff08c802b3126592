package ops

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

	"cleanmon/cmd/cleanmon/internal/api"
	"cleanmon/cmd/cleanmon/internal/daemon"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/store"
)

// TrendOptions are the flags of `cleanmon report trend`.
type TrendOptions struct {
	Zone, Month    string
	URL, TokenFile string // a running daemon, or
	Data, Config   string // a store no daemon holds, with the site's configuration
	Format, Out    string // text, html or pdf; "" is standard output
	Args           []string
}

// check refuses options that cannot make a trend, before anything is read.
func (o TrendOptions) check() error {
	switch {
	case len(o.Args) > 0:
		return fmt.Errorf("unexpected argument %q", o.Args[0])
	case o.Zone == "":
		return errors.New("--zone is required")
	case (o.Data == "") == (o.URL == ""):
		return errors.New("give exactly one of --url or --data")
	case o.Data != "" && o.Config == "":
		return errors.New("--data needs the site's --config")
	case o.Format != "text" && o.Format != "html" && o.Format != "pdf":
		return fmt.Errorf("--format %q: want text, html or pdf", o.Format)
	}
	if _, err := api.ParseMonth(o.Month, time.Now()); err != nil {
		return fmt.Errorf("--month: %q is not a month such as 2026-03", o.Month)
	}
	return nil
}

// Trend prints a zone's month on one page, from a running daemon (URL,
// GET /api/v1/zones/{zone}/trend) or from a store no daemon holds (Data
// with the site's Config).
func Trend(o TrendOptions, stdout io.Writer) error {
	if err := o.check(); err != nil {
		return usage(err)
	}
	var status int
	var body []byte
	if o.URL != "" {
		token, err := readToken(o.TokenFile)
		if err != nil {
			return usage(err)
		}
		if status, body, err = fetchTrend(o.URL, token, o.Zone, o.Month); err != nil {
			return fault(err)
		}
	} else {
		var err error
		if status, body, err = storedTrend(o.Data, o.Config, o.Zone, o.Month); err != nil {
			return err
		}
	}
	if status != http.StatusOK {
		var e struct{ Error string }
		json.Unmarshal(body, &e)
		line := fmt.Sprintf("%d: %s", status, oneLine(e.Error))
		return &Error{Lines: []string{line}, Usage: status == http.StatusBadRequest || status == http.StatusNotFound}
	}
	var t report.Trend
	if err := json.Unmarshal(body, &t); err != nil {
		return &Error{Lines: []string{fmt.Sprintf("the answer is not a trend: %v", err)}, Err: err}
	}
	var b bytes.Buffer
	var err error
	switch o.Format {
	case "html":
		err = report.WriteTrendHTML(&b, t)
	case "pdf":
		err = report.WriteTrendPDF(&b, t)
	default:
		err = report.WriteTrendText(&b, t)
	}
	if err == nil {
		if o.Out == "" {
			_, err = stdout.Write(b.Bytes())
		} else {
			err = os.WriteFile(o.Out, b.Bytes(), 0o644)
		}
	}
	if err != nil {
		return fault(err)
	}
	return nil
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
func storedTrend(data, config, zone, month string) (int, []byte, error) {
	cfg, err := site.LoadFile(config)
	if err != nil {
		return 0, nil, usage(err)
	}
	st, err := store.Open(data, store.Options{})
	if err != nil {
		if errors.Is(err, store.ErrLocked) {
			return 0, nil, fault(err, "a daemon holds this store; use --url")
		}
		return 0, nil, fault(err)
	}
	defer st.Close()
	zones, err := daemon.OfflineJudge(cfg, st, time.Now)
	if err != nil {
		if errors.Is(err, daemon.ErrUsage) {
			return 0, nil, usage(err)
		}
		return 0, nil, fault(err)
	}
	srv := api.New(api.Options{Site: cfg, Zones: zones, Store: st, Ingest: api.NoIngest{}, Alarms: api.NoAlarms{},
		Log: slog.New(slog.NewTextHandler(io.Discard, nil)), Now: time.Now})
	status, body := srv.TrendJSON(context.Background(), zone, month)
	return status, body, nil
}
