package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// browser is one headless Chromium driven through chromedp, with the
// console of its tab collected so that a test can fail on a script error
// or a refused content security policy.
type browser struct {
	t   *testing.T
	ctx context.Context

	mu      sync.Mutex
	console []chromedp.ConsoleMessage
}

// chromiumPath finds Debian's chromium; without it the browser tests skip,
// unless CLEANMON_REQUIRE_TOOLS is set (CI), where they fail.
func chromiumPath(t *testing.T) string {
	t.Helper()
	for _, p := range []string{"chromium", "/usr/bin/chromium"} {
		if path, err := exec.LookPath(p); err == nil {
			return path
		}
	}
	if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
		t.Fatal("chromium not found (Debian package chromium) and CLEANMON_REQUIRE_TOOLS is set")
	}
	t.Skip("chromium not found (apt-get install chromium): the browser tests did not run")
	return ""
}

// newBrowser starts Chromium with a fresh profile (bounded to a minute)
// and closes it when the test ends.
func newBrowser(t *testing.T) *browser {
	t.Helper()
	path := chromiumPath(t)
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(path),
		chromedp.Headless,
		chromedp.NoSandbox, // the tests may run as root, where the sandbox refuses to start
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.NoDefaultBrowserCheck,
		// The closed network of the test machines refuses what Chromium
		// fetches for itself; without these it stalls on start.
		chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.Flag("disable-extensions", true),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1600, 1000),
	}
	actx, cancelAlloc := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancelCtx := chromedp.NewContext(actx)
	t.Cleanup(func() {
		cancelCtx()
		cancelAlloc()
	})
	// The first Run ties the browser's life to its context, so it gets no
	// deadline of its own; the wait for it is bounded here instead.
	started := make(chan error, 1)
	go func() { started <- chromedp.Do(ctx) }()
	select {
	case err := <-started:
		if err != nil {
			t.Fatalf("starting chromium: %v", err)
		}
	case <-time.After(60 * time.Second):
		cancelCtx()
		t.Fatal("chromium did not start within 60 s")
	}
	b := &browser{t: t, ctx: ctx}
	msgs := chromedp.Console(ctx)
	go func() {
		for m, err := range msgs {
			if err != nil {
				return
			}
			b.mu.Lock()
			b.console = append(b.console, m)
			b.mu.Unlock()
		}
	}()
	return b
}

// do runs actions with a bound.
func (b *browser) do(bound time.Duration, what string, actions ...chromedp.Action[chromedp.Void]) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, bound)
	defer cancel()
	if err := chromedp.Do(ctx, actions...); err != nil {
		b.t.Fatalf("%s: %v%s", what, err, b.consoleText())
	}
}

// eval evaluates a JavaScript expression and decodes its value into v.
func (b *browser) eval(js string, v any) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 20*time.Second)
	defer cancel()
	raw, err := chromedp.Run(ctx, chromedp.Evaluate[[]byte](js))
	if err != nil {
		b.t.Fatalf("evaluating %s: %v%s", js, err, b.consoleText())
	}
	if err := json.Unmarshal(raw, v); err != nil {
		b.t.Fatalf("evaluating %s: %v in %s", js, err, raw)
	}
}

// waitJS waits, bounded, until a JavaScript expression is truthy.
func (b *browser) waitJS(bound time.Duration, what, js string) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, bound+5*time.Second)
	defer cancel()
	_, err := chromedp.Run(ctx, chromedp.Poll[chromedp.Void](js, chromedp.WithPollingInterval(100*time.Millisecond), chromedp.WithPollingTimeout(bound)))
	if err != nil {
		var body string
		b.evalQuiet(`document.body ? document.body.innerText.slice(0, 3000) : ""`, &body)
		b.t.Fatalf("waiting %s for %s: %v\npage text:\n%s%s", bound, what, err, body, b.consoleText())
	}
}

func (b *browser) evalQuiet(js string, v any) {
	ctx, cancel := context.WithTimeout(b.ctx, 5*time.Second)
	defer cancel()
	if raw, err := chromedp.Run(ctx, chromedp.Evaluate[[]byte](js)); err == nil {
		json.Unmarshal(raw, v)
	}
}

// open navigates and waits for the page's script to say it is ready.
func (b *browser) open(url, ready string) {
	b.t.Helper()
	b.do(30*time.Second, "opening "+url, chromedp.Navigate(url))
	if ready != "" {
		b.waitJS(20*time.Second, url+" to be ready", ready)
	}
}

// screenshot saves a PNG of the whole page under $CLEANMON_SCREENSHOTS,
// else under the test's temporary directory, and logs where.
func (b *browser) screenshot(name string) string {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 30*time.Second)
	defer cancel()
	png, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	if err != nil {
		b.t.Fatalf("screenshot %s: %v", name, err)
	}
	dir := os.Getenv("CLEANMON_SCREENSHOTS")
	if dir == "" {
		dir = b.t.TempDir()
	} else if err := os.MkdirAll(dir, 0o755); err != nil {
		b.t.Fatal(err)
	}
	p := filepath.Join(dir, name+".png")
	if err := os.WriteFile(p, png, 0o644); err != nil {
		b.t.Fatal(err)
	}
	b.t.Logf("screenshot %s: %s (%d bytes)", name, p, len(png))
	return p
}

func (b *browser) consoleText() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	if len(b.console) == 0 {
		return ""
	}
	var s strings.Builder
	s.WriteString("\nbrowser console:")
	for _, m := range b.console {
		fmt.Fprintf(&s, "\n  %s (%s:%d)", m.String(), m.URL, m.Line)
	}
	return s.String()
}

// checkConsole fails the test on any uncaught script error and on any
// refusal of the content security policy: the pages must run under the
// strict policy they are sent with. wantErrors are substrings of console
// errors the test caused on purpose (a refused request shows as one).
func (b *browser) checkConsole(wantErrors ...string) {
	b.t.Helper()
	b.mu.Lock()
	defer b.mu.Unlock()
	for _, m := range b.console {
		text := m.Text
		switch {
		case m.IsException():
			b.t.Errorf("script error in the page: %s (%s:%d)", text, m.URL, m.Line)
		case strings.Contains(text, "Content Security Policy") || strings.Contains(text, "Content-Security-Policy"):
			b.t.Errorf("content security policy refused something: %s", text)
		case m.Type == chromedp.ConsoleError:
			expected := false
			for _, w := range wantErrors {
				expected = expected || strings.Contains(text, w)
			}
			if !expected {
				b.t.Errorf("console error: %s (%s:%d)", text, m.URL, m.Line)
			}
		}
	}
}
