package peers

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"time"
)

const influxDB = "cleanmon"

// influx runs InfluxDB 1.x with its write-ahead log fsynced on every
// write, so an acknowledged write is on disk.
type influx struct {
	bin  string
	root string // holds the config and log; root/store holds meta, data and wal
	o    Options
	proc *process
	c    *client
}

func (p *influx) name() string    { return "influxdb" }
func (p *influx) durable() bool   { return true }
func (p *influx) dataDir() string { return filepath.Join(p.root, "store") }

// influxConfig writes a configuration with every listener but HTTP off,
// both HTTP and the backup RPC bound to loopback, no usage reporting
// ("reporting-enabled" is the Debian build's key, "reporting-disabled"
// upstream's; each build ignores the other's), no self-monitoring
// database, and wal-fsync-delay 0s.
func influxConfig(store string, httpPort, rpcPort int) string {
	q := func(s string) string { return fmt.Sprintf("%q", s) }
	return `reporting-disabled = true
reporting-enabled = false
bind-address = "127.0.0.1:` + itoa(rpcPort) + `"

[meta]
  dir = ` + q(filepath.Join(store, "meta")) + `
  logging-enabled = false

[data]
  dir = ` + q(filepath.Join(store, "data")) + `
  wal-dir = ` + q(filepath.Join(store, "wal")) + `
  wal-fsync-delay = "0s"
  query-log-enabled = false

[monitor]
  store-enabled = false

[subscriber]
  enabled = false

[continuous_queries]
  enabled = false

[retention]
  enabled = false

[shard-precreation]
  enabled = false

[http]
  enabled = true
  bind-address = "127.0.0.1:` + itoa(httpPort) + `"
  auth-enabled = false
  log-enabled = false
  pprof-enabled = false
  unix-socket-enabled = false
  max-row-limit = 0

[logging]
  level = "warn"
  suppress-logo = true
`
}

// start starts influxd on the same directories each time, on fresh
// ports, and makes sure the database exists.
func (p *influx) start(ctx context.Context) error {
	var lastErr error
	for attempt := 0; attempt < 3; attempt++ {
		httpPort, err := freePort()
		if err != nil {
			return err
		}
		rpcPort, err := freePort()
		if err != nil {
			return err
		}
		cfg := filepath.Join(p.root, "influxdb.conf")
		if err := os.WriteFile(cfg, []byte(influxConfig(p.dataDir(), httpPort, rpcPort)), 0o600); err != nil {
			return err
		}
		proc, err := startProcess(ctx, p.bin, []string{"-config", cfg}, filepath.Join(p.root, fmt.Sprintf("influxd-%d.log", attempt)))
		if err != nil {
			return err
		}
		p.proc = proc
		p.c = newClient(httpPort, p.o.Writers, p.o.RequestTimeout)
		if lastErr = waitReady(ctx, proc, p.c.base+"/ping", http.StatusNoContent, p.o.StartTimeout); lastErr == nil {
			_, _, err := p.c.do(ctx, http.MethodPost, "/query?q="+url.QueryEscape("CREATE DATABASE "+influxDB), nil, http.StatusOK)
			return err
		}
		proc.kill()
		if !errors.Is(lastErr, ErrExited) || !strings.Contains(lastErr.Error(), "address already in use") {
			return lastErr
		}
	}
	return lastErr
}

func (p *influx) write(ctx context.Context, body []byte) error {
	_, _, err := p.c.do(ctx, http.MethodPost, "/write?db="+influxDB+"&precision=s", body, http.StatusNoContent)
	return err
}

// flush is nothing: an acknowledged write is already in the fsynced WAL
// and visible to queries.
func (p *influx) flush(context.Context) error { return nil }

func (p *influx) query(ctx context.Context, q string, chunked bool) ([]byte, time.Duration, error) {
	v := url.Values{"db": {influxDB}, "q": {q}}
	if chunked {
		v.Set("chunked", "true")
	}
	return p.c.do(ctx, http.MethodGet, "/query?"+v.Encode(), nil, http.StatusOK)
}

// influxAnswer is one JSON object of a (possibly chunked) query answer.
type influxAnswer struct {
	Results []struct {
		Error  string `json:"error"`
		Series []struct {
			Columns []string            `json:"columns"`
			Values  [][]json.RawMessage `json:"values"`
		} `json:"series"`
	} `json:"results"`
	Error string `json:"error"`
}

// eachRow decodes every object of an answer and calls f with each row.
func eachRow(body []byte, f func(cols []string, row []json.RawMessage) error) error {
	dec := json.NewDecoder(bytes.NewReader(body))
	for {
		var a influxAnswer
		if err := dec.Decode(&a); err == io.EOF {
			return nil
		} else if err != nil {
			return fmt.Errorf("influxdb: %w: %w", ErrAnswer, err)
		}
		if a.Error != "" {
			return fmt.Errorf("influxdb: %w: %s", ErrAnswer, a.Error)
		}
		for _, r := range a.Results {
			if r.Error != "" {
				return fmt.Errorf("influxdb: %w: %s", ErrAnswer, r.Error)
			}
			for _, s := range r.Series {
				for _, row := range s.Values {
					if err := f(s.Columns, row); err != nil {
						return err
					}
				}
			}
		}
	}
}

// count asks for the number of stored points of each channel, over
// every reading the run wrote.
func (p *influx) count(ctx context.Context, from, to int64) ([4]int64, error) {
	var n [4]int64
	sel := make([]string, len(channels))
	for i, c := range channels {
		sel[i] = "count(" + c + ")"
	}
	q := fmt.Sprintf("SELECT %s FROM %s WHERE time >= %d AND time <= %d", strings.Join(sel, ","), measurement, from*1e9, to*1e9)
	body, _, err := p.query(ctx, q, false)
	if err != nil {
		return n, err
	}
	err = eachRow(body, func(cols []string, row []json.RawMessage) error {
		if len(row) != 1+len(channels) {
			return fmt.Errorf("influxdb count: %w: %d columns, want %d", ErrAnswer, len(row), 1+len(channels))
		}
		for i := range channels {
			if err := json.Unmarshal(row[1+i], &n[i]); err != nil {
				return fmt.Errorf("influxdb count column %s: %w", cols[1+i], err)
			}
		}
		return nil
	})
	return n, err
}

// raw fetches every reading of pc-0 in [from, to), chunked as a client
// reading a long range would, and returns rows and time to last byte.
func (p *influx) raw(ctx context.Context, from, to int64) (int64, time.Duration, error) {
	q := fmt.Sprintf("SELECT * FROM %s WHERE %s = 'pc-0' AND time >= %d AND time < %d", measurement, tagCounter, from*1e9, to*1e9)
	body, d, err := p.query(ctx, q, true)
	if err != nil {
		return 0, 0, err
	}
	var rows int64
	err = eachRow(body, func([]string, []json.RawMessage) error { rows++; return nil })
	return rows, d, err
}

// hourly fetches pc-0's hourly means of every channel in [from, to).
func (p *influx) hourly(ctx context.Context, from, to int64) (int64, time.Duration, error) {
	sel := make([]string, len(channels))
	for i, c := range channels {
		sel[i] = "mean(" + c + ")"
	}
	q := fmt.Sprintf("SELECT %s FROM %s WHERE %s = 'pc-0' AND time >= %d AND time < %d GROUP BY time(1h)", strings.Join(sel, ","), measurement, tagCounter, from*1e9, to*1e9)
	body, d, err := p.query(ctx, q, false)
	if err != nil {
		return 0, 0, err
	}
	var rows int64
	err = eachRow(body, func([]string, []json.RawMessage) error { rows++; return nil })
	return rows, d, err
}

func (p *influx) stop() error {
	if p.c != nil {
		p.c.close()
	}
	return p.proc.stop(p.o.StopTimeout)
}

func (p *influx) kill() {
	if p.proc != nil {
		p.proc.kill()
	}
}

// version asks the binary itself, e.g. "InfluxDB v1.6.7~rc0 (git: ...)".
func (p *influx) version(ctx context.Context) string {
	ctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	out, err := exec.CommandContext(ctx, p.bin, "version").Output()
	if err != nil {
		return "unknown"
	}
	return strings.TrimSpace(string(out))
}
