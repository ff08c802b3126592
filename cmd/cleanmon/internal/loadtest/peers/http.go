package peers

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"net/http"
	"strings"
	"sync"
	"sync/atomic"
	"time"
)

// client is the HTTP side of one peer: loopback only, every request under
// its own time limit.
type client struct {
	base    string // http://127.0.0.1:PORT
	http    *http.Client
	timeout time.Duration
}

func newClient(port, writers int, timeout time.Duration) *client {
	tr := &http.Transport{MaxIdleConnsPerHost: writers + 2, DisableCompression: true}
	return &client{base: "http://127.0.0.1:" + itoa(port), http: &http.Client{Transport: tr}, timeout: timeout}
}

// do sends a request and returns the whole answer and the time from
// sending it to its last byte. A status other than want is an error that
// quotes the start of the answer.
func (c *client) do(ctx context.Context, method, path string, body []byte, want int) ([]byte, time.Duration, error) {
	ctx, cancel := context.WithTimeout(ctx, c.timeout)
	defer cancel()
	var rd io.Reader
	if body != nil {
		rd = bytes.NewReader(body)
	}
	req, err := http.NewRequestWithContext(ctx, method, c.base+path, rd)
	if err != nil {
		return nil, 0, err
	}
	if body != nil {
		req.Header.Set("Content-Type", "text/plain; charset=utf-8")
	}
	t0 := time.Now()
	resp, err := c.http.Do(req)
	if err != nil {
		return nil, 0, err
	}
	defer resp.Body.Close()
	var out bytes.Buffer
	if _, err := io.Copy(&out, resp.Body); err != nil {
		return nil, 0, fmt.Errorf("%s %s: reading the answer: %w", method, shortPath(path), err)
	}
	d := time.Since(t0)
	if resp.StatusCode != want {
		msg := out.String()
		if len(msg) > 300 {
			msg = msg[:300]
		}
		return nil, d, fmt.Errorf("%s %s: %w: %s %s", method, shortPath(path), ErrAnswer, resp.Status, strings.TrimSpace(msg))
	}
	return out.Bytes(), d, nil
}

func (c *client) close() { c.http.CloseIdleConnections() }

func shortPath(p string) string {
	if i := strings.IndexByte(p, '?'); i >= 0 {
		return p[:i]
	}
	return p
}

// postAll sends the batches with the given number of concurrent writers,
// each taking the next unsent batch, so the batches leave in time order.
// The first error stops every writer. It returns the time from the first
// request to the last acknowledgement.
func postAll(ctx context.Context, batches [][]byte, writers int, post func(context.Context, []byte) error) (time.Duration, error) {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var next atomic.Int64
	var once sync.Once
	var first error
	var wg sync.WaitGroup
	t0 := time.Now()
	for w := 0; w < writers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for ctx.Err() == nil {
				i := int(next.Add(1) - 1)
				if i >= len(batches) {
					return
				}
				if err := post(ctx, batches[i]); err != nil {
					once.Do(func() { first = fmt.Errorf("batch %d of %d: %w", i+1, len(batches), err); cancel() })
					return
				}
			}
		}()
	}
	wg.Wait()
	d := time.Since(t0)
	if first != nil {
		return d, first
	}
	return d, ctx.Err()
}
