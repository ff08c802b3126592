package people

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/http/cookiejar"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"
)

// The provider is the npm package oidc-provider under Node.js, a real
// and independent OpenID Connect implementation, installed by
//
//	npm ci --prefix cmd/cleanmon/internal/people/testdata/oidc
//
// The tests skip without node or the package, unless
// CLEANMON_REQUIRE_TOOLS=1.

const (
	providerDir   = "testdata/oidc"
	clientSecret  = "loopback-client-secret"
	lenaPassword  = "north-airlock-cascade-7" // provider's people, testdata/oidc/provider.mjs
	guestPassword = "visitor-badge-number-9"
)

func needTool(t *testing.T, what string) {
	t.Helper()
	if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" { // set, to any value, as every package reads it
		t.Fatalf("%s is missing and CLEANMON_REQUIRE_TOOLS is set", what)
	}
	t.Skipf("%s is missing; install it, or set CLEANMON_REQUIRE_TOOLS to fail instead", what)
}

// lockedBuffer collects the provider's stderr for a failure message.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

// startProvider runs the provider for the callback redirect and returns
// its issuer URL.
func startProvider(t *testing.T, redirect string) string {
	t.Helper()
	node, err := exec.LookPath("node")
	if err != nil {
		needTool(t, "node")
	}
	if _, err := os.Stat(filepath.Join(providerDir, "node_modules", "oidc-provider", "package.json")); err != nil {
		needTool(t, "the npm package oidc-provider (npm ci --prefix "+providerDir+")")
	}
	ctx, cancel := context.WithCancel(context.Background())
	cmd := exec.CommandContext(ctx, node, "provider.mjs")
	cmd.Dir = providerDir
	cmd.Env = append(os.Environ(), "REDIRECT_URI="+redirect, "CLIENT_SECRET="+clientSecret)
	var stderr lockedBuffer
	cmd.Stderr = &stderr
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cancel(); _ = cmd.Wait() })
	issuer := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			if u, ok := strings.CutPrefix(sc.Text(), "issuer "); ok {
				issuer <- u
			}
		}
	}()
	select {
	case u := <-issuer:
		return u
	case <-time.After(30 * time.Second):
		t.Fatalf("the provider did not start within 30 s; stderr:\n%s", stderr.String())
	}
	return ""
}

type oidcSite struct {
	*fixture
	web  *Web
	oidc *OIDC
	base string
}

func newOIDCSite(t *testing.T) *oidcSite {
	t.Helper()
	f := newFixture(t)
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	base := "http://" + ln.Addr().String()
	issuer := startProvider(t, base+"/auth/oidc/callback")
	sessions := NewSessions(SessionConfig{}, SystemClock) // ID tokens carry real times
	web, err := NewWeb(f.dir, sessions, f.audit, WebConfig{})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	o, err := NewOIDC(ctx, OIDCConfig{
		Issuer: issuer, ClientID: "cleanmon", ClientSecret: clientSecret, RedirectURL: base + "/auth/oidc/callback",
		Scopes: []string{"profile", "roles"}, RoleClaim: "cleanmon_roles",
		Roles: []RoleRule{{"cleanroom-admins", RoleAdmin}, {"cleanroom-qa", RoleQA}, {"cleanroom-operators", RoleOperator}},
	}, web, SystemClock)
	if err != nil {
		t.Fatal(err)
	}
	mux := http.NewServeMux()
	mux.HandleFunc("GET /auth/oidc/start", o.HandleStart)
	mux.HandleFunc("GET /auth/oidc/callback", o.HandleCallback)
	mux.HandleFunc("GET /whoami", func(w http.ResponseWriter, r *http.Request) {
		if s, ok := FromContext(r.Context()); ok && s.SignedIn() {
			fmt.Fprintf(w, "%s|%s|%s|%s|%d", s.Person.Name, s.Person.FullName, s.Person.Role, s.Method, s.AuthTime.UnixNano())
			return
		}
		_, _ = io.WriteString(w, "anonymous")
	})
	srv := &http.Server{Handler: web.Middleware(mux), ReadHeaderTimeout: 10 * time.Second}
	go func() { _ = srv.Serve(ln) }()
	t.Cleanup(func() { _ = srv.Close() })
	return &oidcSite{fixture: f, web: web, oidc: o, base: base}
}

func browser(t *testing.T) *http.Client {
	jar, err := cookiejar.New(nil)
	if err != nil {
		t.Fatal(err)
	}
	return &http.Client{Jar: jar, Timeout: 20 * time.Second}
}

func fetch(t *testing.T, c *http.Client, method, u string, form url.Values) (*http.Response, string) {
	t.Helper()
	var body io.Reader
	if form != nil {
		body = strings.NewReader(form.Encode())
	}
	req, err := http.NewRequest(method, u, body)
	if err != nil {
		t.Fatal(err)
	}
	if form != nil {
		req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	}
	resp, err := c.Do(req)
	if err != nil {
		t.Fatalf("%s %s: %v", method, u, err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(io.LimitReader(resp.Body, 1<<16))
	return resp, string(b)
}

// providerSignIn starts at the daemon, signs in at the provider's form
// and returns the daemon's last answer.
func (o *oidcSite) providerSignIn(t *testing.T, c *http.Client, start, login, password string) (*http.Response, string) {
	t.Helper()
	resp, body := fetch(t, c, "GET", o.base+start, nil)
	if resp.StatusCode != http.StatusOK || !strings.Contains(body, "prompt login") {
		t.Fatalf("expected the provider's sign-in form, got %d %s at %s", resp.StatusCode, body, resp.Request.URL)
	}
	return fetch(t, c, "POST", resp.Request.URL.String()+"/login", url.Values{"login": {login}, "password": {password}})
}

func TestOIDCSignInWithRealProvider(t *testing.T) {
	o := newOIDCSite(t)
	c := browser(t)

	// The authorisation request carries PKCE, state and nonce.
	noFollow := *c
	noFollow.CheckRedirect = func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }
	resp, _ := fetch(t, &noFollow, "GET", o.base+"/auth/oidc/start?next=/whoami", nil)
	loc, err := url.Parse(resp.Header.Get("Location"))
	if err != nil || resp.StatusCode != http.StatusFound {
		t.Fatalf("start: %d %q", resp.StatusCode, resp.Header.Get("Location"))
	}
	q := loc.Query()
	if q.Get("code_challenge_method") != "S256" || len(q.Get("code_challenge")) != 43 || q.Get("state") == "" || q.Get("nonce") == "" ||
		q.Get("response_type") != "code" || !strings.Contains(q.Get("scope"), "openid") {
		t.Fatalf("authorisation request lacks PKCE, state or nonce: %s", loc)
	}

	resp, body := o.providerSignIn(t, c, "/auth/oidc/start?next=/whoami", "lena", lenaPassword)
	if resp.StatusCode != http.StatusOK || resp.Request.URL.Path != "/auth/oidc/callback" || !strings.Contains(body, `url=/whoami`) {
		t.Fatalf("callback: %d at %s: %s", resp.StatusCode, resp.Request.URL, body)
	}
	callback := resp.Request.URL.String()
	_, who := fetch(t, c, "GET", o.base+"/whoami", nil)
	parts := strings.Split(who, "|")
	if len(parts) != 5 || parts[0] != "lena" || parts[1] != "Lena Sorensen" || parts[2] != "qa" || parts[3] != "oidc" {
		t.Fatalf("whoami after provider sign-in = %q, want lena, Lena Sorensen, qa, oidc", who)
	}
	a, err := o.dir.Lookup("lena")
	if err != nil || a.Issuer == "" || a.Subject != "lena" || a.PasswordHash != "" || a.Role != "qa" {
		t.Fatalf("bound account = %+v, %v", a, err)
	}
	if es := o.entries(t, EventSignIn); len(es) != 1 || !strings.Contains(string(es[0].Detail), "method: oidc") {
		t.Fatalf("sign-in entries = %+v", es)
	}

	// The callback works once.
	if resp, _ := fetch(t, c, "GET", callback, nil); resp.StatusCode != http.StatusBadRequest {
		t.Fatalf("replayed callback: %d, want 400", resp.StatusCode)
	}

	// A fresh sign-in at the provider before a signature moves AuthTime.
	before := parts[4]
	time.Sleep(10 * time.Millisecond)
	resp, body = o.providerSignIn(t, c, "/auth/oidc/start?reauth=1&next=/whoami", "lena", lenaPassword)
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("re-authentication: %d %s", resp.StatusCode, body)
	}
	_, who = fetch(t, c, "GET", o.base+"/whoami", nil)
	if after := strings.Split(who, "|"); len(after) != 5 || after[0] != "lena" || after[4] <= before {
		t.Fatalf("after re-authentication %q (AuthTime before %s)", who, before)
	}
}

func TestOIDCRefusals(t *testing.T) {
	o := newOIDCSite(t)

	t.Run("no mapped role", func(t *testing.T) {
		c := browser(t)
		resp, body := o.providerSignIn(t, c, "/auth/oidc/start", "guest", guestPassword)
		if resp.StatusCode != http.StatusUnauthorized || !strings.Contains(body, "maps to no role") {
			t.Fatalf("guest: %d %s", resp.StatusCode, body)
		}
		if _, err := o.dir.Lookup("guest"); !errors.Is(err, ErrNotFound) {
			t.Fatalf("a refused person got an account: %v", err)
		}
	})
	t.Run("name of a local account", func(t *testing.T) {
		c := browser(t)
		resp, body := o.providerSignIn(t, c, "/auth/oidc/start", "piotr", piotrPassword)
		if resp.StatusCode != http.StatusForbidden {
			t.Fatalf("provider's piotr over local piotr: %d %s", resp.StatusCode, body)
		}
		if _, who := fetch(t, c, "GET", o.base+"/whoami", nil); who != "anonymous" {
			t.Fatalf("signed in anyway: %q", who)
		}
	})
	t.Run("tampered state", func(t *testing.T) {
		c := browser(t)
		c.CheckRedirect = func(r *http.Request, _ []*http.Request) error {
			if r.URL.Path == "/auth/oidc/callback" {
				return http.ErrUseLastResponse
			}
			return nil
		}
		resp, _ := o.providerSignIn(t, c, "/auth/oidc/start", "lena", lenaPassword)
		cb, err := url.Parse(resp.Header.Get("Location"))
		if err != nil || cb.Path != "/auth/oidc/callback" {
			t.Fatalf("expected a redirect to the callback, got %d %q", resp.StatusCode, resp.Header.Get("Location"))
		}
		q := cb.Query()
		q.Set("state", "x"+q.Get("state"))
		cb.RawQuery = q.Encode()
		resp, body := fetch(t, c, "GET", cb.String(), nil)
		if resp.StatusCode != http.StatusBadRequest || !strings.Contains(body, "state") {
			t.Fatalf("tampered state: %d %s", resp.StatusCode, body)
		}
		if _, who := fetch(t, c, "GET", o.base+"/whoami", nil); who != "anonymous" {
			t.Fatalf("signed in anyway: %q", who)
		}
	})
	t.Run("disabled account", func(t *testing.T) {
		c := browser(t)
		if resp, body := o.providerSignIn(t, c, "/auth/oidc/start", "lena", lenaPassword); resp.StatusCode != http.StatusOK {
			t.Fatalf("first sign-in: %d %s", resp.StatusCode, body)
		}
		if err := o.dir.Disable(context.Background(), "admin", "lena", "left the site"); err != nil {
			t.Fatal(err)
		}
		c = browser(t)
		resp, body := o.providerSignIn(t, c, "/auth/oidc/start", "lena", lenaPassword)
		if resp.StatusCode != http.StatusForbidden || !strings.Contains(body, "disabled") {
			t.Fatalf("disabled account through the provider: %d %s", resp.StatusCode, body)
		}
	})
}
