package peers

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"path/filepath"
	"strings"
	"time"
)

// victoria runs single-node VictoriaMetrics. It acknowledges a write once
// the rows are buffered in memory, not on disk: its ingest figure is an
// acknowledged rate, not a durable one.
type victoria struct {
	bin  string
	root string // holds the log; root/store is -storageDataPath
	o    Options
	proc *process
	c    *client
}

func (p *victoria) name() string    { return "victoria-metrics" }
func (p *victoria) durable() bool   { return false }
func (p *victoria) dataDir() string { return filepath.Join(p.root, "store") }

// start starts VictoriaMetrics on loopback with a retention long enough
// for a year of back-dated readings (the default, one month, would drop
// them) and no other listener (Graphite, OpenTSDB and InfluxDB UDP/TCP
// are off unless given an address).
func (p *victoria) start(ctx context.Context) error {
	var lastErr error
	for attempt := 0; attempt < 3; attempt++ {
		port, err := freePort()
		if err != nil {
			return err
		}
		args := []string{
			"-storageDataPath", p.dataDir(),
			"-httpListenAddr", "127.0.0.1:" + itoa(port),
			"-retentionPeriod", "100y",
			"-loggerLevel", "WARN",
			"-search.maxQueryDuration", p.o.RequestTimeout.String(),
		}
		proc, err := startProcess(ctx, p.bin, args, filepath.Join(p.root, fmt.Sprintf("victoria-metrics-%d.log", attempt)))
		if err != nil {
			return err
		}
		p.proc = proc
		p.c = newClient(port, p.o.Writers, p.o.RequestTimeout)
		if lastErr = waitReady(ctx, proc, p.c.base+"/health", http.StatusOK, p.o.StartTimeout); lastErr == nil {
			return nil
		}
		proc.kill()
		if !errors.Is(lastErr, ErrExited) || !strings.Contains(lastErr.Error(), "address already in use") {
			return lastErr
		}
	}
	return lastErr
}

// write posts line protocol to the InfluxDB-compatible route, without a
// db parameter so no extra label is added.
func (p *victoria) write(ctx context.Context, body []byte) error {
	_, _, err := p.c.do(ctx, http.MethodPost, "/write?precision=s", body, http.StatusNoContent)
	return err
}

// flush makes buffered rows searchable. It does not fsync them; only a
// clean stop writes everything to disk.
func (p *victoria) flush(ctx context.Context) error {
	_, _, err := p.c.do(ctx, http.MethodGet, "/internal/force_flush", nil, http.StatusOK)
	return err
}

// export returns the JSON-lines export of the series matched in
// [from, to] (Unix seconds, both ends included).
func (p *victoria) export(ctx context.Context, match string, from, to int64) ([]byte, time.Duration, error) {
	v := url.Values{"match[]": {match}, "start": {itoa64(from)}, "end": {itoa64(to)}}
	return p.c.do(ctx, http.MethodGet, "/api/v1/export?"+v.Encode(), nil, http.StatusOK)
}

// exportLine is one series of an export answer.
type exportLine struct {
	Metric     map[string]string `json:"metric"`
	Timestamps []int64           `json:"timestamps"`
}

// perChannel counts the exported samples of each channel.
func perChannel(body []byte) ([4]int64, error) {
	var n [4]int64
	sc := bufio.NewScanner(bytes.NewReader(body))
	sc.Buffer(make([]byte, 1<<20), 1<<30)
	for line := 1; sc.Scan(); line++ {
		var l exportLine
		if err := json.Unmarshal(sc.Bytes(), &l); err != nil {
			return n, fmt.Errorf("victoria-metrics export line %d: %w: %w", line, ErrAnswer, err)
		}
		i := channelIndex(strings.TrimPrefix(l.Metric["__name__"], measurement+"_"))
		if i < 0 {
			return n, fmt.Errorf("victoria-metrics export line %d: %w: unexpected series %v", line, ErrAnswer, l.Metric)
		}
		n[i] += int64(len(l.Timestamps))
	}
	return n, sc.Err()
}

func channelIndex(name string) int {
	for i, c := range channels {
		if c == name {
			return i
		}
	}
	return -1
}

// count exports every series the run wrote and counts the samples.
func (p *victoria) count(ctx context.Context, from, to int64) ([4]int64, error) {
	body, _, err := p.export(ctx, `{__name__=~"`+measurement+`_.*"}`, from, to)
	if err != nil {
		return [4]int64{}, err
	}
	return perChannel(body)
}

// raw exports pc-0's four series over [from, to) and returns readings
// (the smallest per-channel sample count) and time to last byte.
func (p *victoria) raw(ctx context.Context, from, to int64) (int64, time.Duration, error) {
	body, d, err := p.export(ctx, `{`+tagCounter+`="pc-0"}`, from, to-1)
	if err != nil {
		return 0, 0, err
	}
	n, err := perChannel(body)
	return minOf(n), d, err
}

// hourly asks for pc-0's hourly averages of each channel over [from, to)
// in one request. Each channel is labelled, because an averaged series
// loses its metric name and four unnamed series with the same labels
// would collide. nocache=1 keeps the answer from the rollup result cache.
func (p *victoria) hourly(ctx context.Context, from, to int64) (int64, time.Duration, error) {
	parts := make([]string, len(channels))
	for i, c := range channels {
		parts[i] = fmt.Sprintf(`label_set(avg_over_time(%s_%s{%s="pc-0"}[1h]), "channel", %q)`, measurement, c, tagCounter, c)
	}
	v := url.Values{
		"query": {strings.Join(parts, " or ")},
		"start": {itoa64(from + 3600)}, "end": {itoa64(to)}, "step": {"1h"}, "nocache": {"1"},
	}
	body, d, err := p.c.do(ctx, http.MethodGet, "/api/v1/query_range?"+v.Encode(), nil, http.StatusOK)
	if err != nil {
		return 0, 0, err
	}
	var a struct {
		Status string `json:"status"`
		Data   struct {
			Result []struct {
				Metric map[string]string `json:"metric"`
				Values [][2]any          `json:"values"`
			} `json:"result"`
		} `json:"data"`
	}
	if err := json.Unmarshal(body, &a); err != nil {
		return 0, 0, fmt.Errorf("victoria-metrics query_range: %w: %w", ErrAnswer, err)
	}
	if a.Status != "success" || len(a.Data.Result) != len(channels) {
		return 0, 0, fmt.Errorf("victoria-metrics query_range: %w: status %q, %d series, want %d", ErrAnswer, a.Status, len(a.Data.Result), len(channels))
	}
	rows := int64(len(a.Data.Result[0].Values))
	for _, s := range a.Data.Result {
		rows = min(rows, int64(len(s.Values)))
	}
	return rows, d, nil
}

func (p *victoria) stop() error {
	if p.c != nil {
		p.c.close()
	}
	return p.proc.stop(p.o.StopTimeout)
}

func (p *victoria) kill() {
	if p.proc != nil {
		p.proc.kill()
	}
}

// version reads vm_app_version from the running server's metrics; the
// Debian build prints nothing for -version.
func (p *victoria) version(ctx context.Context) string {
	body, _, err := p.c.do(ctx, http.MethodGet, "/metrics", nil, http.StatusOK)
	if err != nil {
		return "unknown"
	}
	for _, l := range strings.Split(string(body), "\n") {
		if strings.HasPrefix(l, "vm_app_version{") {
			if i := strings.Index(l, `version="`); i >= 0 {
				v := l[i+len(`version="`):]
				if j := strings.IndexByte(v, '"'); j > 0 {
					return "VictoriaMetrics " + v[:j]
				}
			}
		}
	}
	return "VictoriaMetrics (version not reported" + packageVersion(ctx, "victoria-metrics") + ")"
}

func minOf(n [4]int64) int64 {
	m := n[0]
	for _, v := range n[1:] {
		m = min(m, v)
	}
	return m
}
