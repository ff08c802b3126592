package people

import (
	"context"
	"io"
	"net/http"
	"net/http/httptest"
	"net/url"
	"strings"
	"testing"
	"time"
)

// site is a real HTTP server on loopback with the sign-in routes, a page
// that says who is signed in, and a state-changing action.
type site struct {
	*fixture
	web *Web
	srv *httptest.Server
}

func newSite(t *testing.T, useTLS bool) *site {
	t.Helper()
	f := newFixture(t)
	sessions := NewSessions(SessionConfig{}, f.clock)
	web, err := NewWeb(f.dir, sessions, f.audit, WebConfig{})
	if err != nil {
		t.Fatal(err)
	}
	mux := http.NewServeMux()
	mux.HandleFunc("GET /signin", func(w http.ResponseWriter, r *http.Request) {
		s, err := web.PreSession(w, r)
		if err != nil {
			http.Error(w, err.Error(), 500)
			return
		}
		_, _ = io.WriteString(w, s.CSRF)
	})
	mux.HandleFunc("POST /signin", web.HandleSignIn)
	mux.HandleFunc("POST /signout", web.HandleSignOut)
	mux.HandleFunc("GET /whoami", func(w http.ResponseWriter, r *http.Request) {
		if s, ok := FromContext(r.Context()); ok && s.SignedIn() {
			_, _ = io.WriteString(w, s.Person.Name+"|"+s.CSRF)
			return
		}
		_, _ = io.WriteString(w, "anonymous")
	})
	mux.HandleFunc("POST /act", func(w http.ResponseWriter, r *http.Request) {
		if s, ok := FromContext(r.Context()); !ok || !s.SignedIn() {
			http.Error(w, "sign in", http.StatusUnauthorized)
			return
		}
		_, _ = io.WriteString(w, "done")
	})
	var srv *httptest.Server
	if useTLS {
		srv = httptest.NewTLSServer(web.Middleware(mux))
	} else {
		srv = httptest.NewServer(web.Middleware(mux))
	}
	t.Cleanup(srv.Close)
	return &site{fixture: f, web: web, srv: srv}
}

// do sends one request with exactly the cookie given (no jar), so a test
// can replay an old session ID.
func (s *site) do(t *testing.T, method, path, cookie string, form url.Values, hdr map[string]string) (*http.Response, string) {
	t.Helper()
	var body io.Reader
	if form != nil {
		body = strings.NewReader(form.Encode())
	}
	req, err := http.NewRequestWithContext(context.Background(), method, s.srv.URL+path, body)
	if err != nil {
		t.Fatal(err)
	}
	if form != nil {
		req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	}
	if cookie != "" {
		req.AddCookie(&http.Cookie{Name: CookieName, Value: cookie})
	}
	for k, v := range hdr {
		req.Header.Set(k, v)
	}
	c := s.srv.Client()
	c.CheckRedirect = func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }
	resp, err := c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(io.LimitReader(resp.Body, 1<<16))
	return resp, string(b)
}

func sessionCookie(resp *http.Response) *http.Cookie {
	for _, c := range resp.Cookies() {
		if c.Name == CookieName {
			return c
		}
	}
	return nil
}

// signIn goes through the sign-in page and form; it returns the session
// cookie before and after.
func (s *site) signIn(t *testing.T, name, password string) (pre, post string) {
	t.Helper()
	resp, token := s.do(t, "GET", "/signin", "", nil, nil)
	c := sessionCookie(resp)
	if c == nil {
		t.Fatal("sign-in page set no session cookie")
	}
	resp, body := s.do(t, "POST", "/signin", c.Value, url.Values{"name": {name}, "password": {password}, CSRFField: {token}, "next": {"/whoami"}}, nil)
	if resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("sign-in as %s: %d %s", name, resp.StatusCode, body)
	}
	if loc := resp.Header.Get("Location"); loc != "/whoami" {
		t.Fatalf("sign-in sent to %q, want /whoami", loc)
	}
	nc := sessionCookie(resp)
	if nc == nil {
		t.Fatal("sign-in set no new session cookie")
	}
	return c.Value, nc.Value
}

func TestSignInRotatesSessionID(t *testing.T) {
	s := newSite(t, false)
	pre, post := s.signIn(t, "ines", inesPassword)
	if pre == post {
		t.Fatal("the session ID did not change at sign-in")
	}
	if _, body := s.do(t, "GET", "/whoami", pre, nil, nil); body != "anonymous" {
		t.Fatalf("the pre-sign-in ID is signed in after sign-in: %q", body)
	}
	if _, body := s.do(t, "GET", "/whoami", post, nil, nil); !strings.HasPrefix(body, "ines|") {
		t.Fatalf("the new ID: %q", body)
	}
	es := s.entries(t, EventSignIn)
	if len(es) != 1 || es[0].Actor != "ines" || !strings.Contains(string(es[0].Detail), "method: password") {
		t.Fatalf("sign-in entries = %+v", es)
	}
}

func TestCookieAttributes(t *testing.T) {
	for _, useTLS := range []bool{false, true} {
		s := newSite(t, useTLS)
		resp, _ := s.do(t, "GET", "/signin", "", nil, nil)
		c := sessionCookie(resp)
		if c == nil || !c.HttpOnly || c.SameSite != http.SameSiteStrictMode || c.Path != "/" || c.Secure != useTLS {
			t.Fatalf("TLS %v: cookie %+v; want HttpOnly, SameSite=Strict, Path /, Secure %v", useTLS, c, useTLS)
		}
		if c.MaxAge != 0 || !c.Expires.IsZero() {
			t.Fatalf("TLS %v: cookie outlives the browser: %+v", useTLS, c)
		}
	}
}

func TestSignInRefusals(t *testing.T) {
	s := newSite(t, false)
	resp, token := s.do(t, "GET", "/signin", "", nil, nil)
	pre := sessionCookie(resp).Value
	cases := []struct {
		name   string
		cookie string
		form   url.Values
		status int
	}{
		{"wrong password", pre, url.Values{"name": {"ines"}, "password": {"not-her-password"}, CSRFField: {token}}, http.StatusUnauthorized},
		{"unknown name", pre, url.Values{"name": {"nobody"}, "password": {inesPassword}, CSRFField: {token}}, http.StatusUnauthorized},
		{"no token", pre, url.Values{"name": {"ines"}, "password": {inesPassword}}, http.StatusForbidden},
		{"no pre-sign-in session", "", url.Values{"name": {"ines"}, "password": {inesPassword}, CSRFField: {token}}, http.StatusForbidden},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			resp, body := s.do(t, "POST", "/signin", tc.cookie, tc.form, nil)
			if resp.StatusCode != tc.status {
				t.Fatalf("status %d (%s), want %d", resp.StatusCode, body, tc.status)
			}
			if c := sessionCookie(resp); c != nil && c.Value != "" {
				t.Fatalf("a refused sign-in set a session cookie")
			}
		})
	}
}

func TestCSRFRefused(t *testing.T) {
	s := newSite(t, false)
	_, sess := s.signIn(t, "ines", inesPassword)
	_, who := s.do(t, "GET", "/whoami", sess, nil, nil)
	token := strings.SplitN(who, "|", 2)[1]
	_, other := s.signIn(t, "piotr", piotrPassword)
	_, whoOther := s.do(t, "GET", "/whoami", other, nil, nil)
	otherToken := strings.SplitN(whoOther, "|", 2)[1]
	origin := s.srv.URL
	cases := []struct {
		name   string
		hdr    map[string]string
		form   url.Values
		status int
	}{
		{"no token", nil, nil, http.StatusForbidden},
		{"wrong token", map[string]string{CSRFHeader: "x" + token[1:]}, nil, http.StatusForbidden},
		{"another session's token", map[string]string{CSRFHeader: otherToken}, nil, http.StatusForbidden},
		{"cross-origin with the right token", map[string]string{CSRFHeader: token, "Origin": "http://evil.example"}, nil, http.StatusForbidden},
		{"cross-site fetch with the right token", map[string]string{CSRFHeader: token, "Sec-Fetch-Site": "cross-site"}, nil, http.StatusForbidden},
		{"right token in the header", map[string]string{CSRFHeader: token, "Origin": origin}, nil, http.StatusOK},
		{"right token in the form", nil, url.Values{CSRFField: {token}}, http.StatusOK},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			resp, body := s.do(t, "POST", "/act", sess, tc.form, tc.hdr)
			if resp.StatusCode != tc.status {
				t.Fatalf("status %d (%s), want %d", resp.StatusCode, body, tc.status)
			}
			if tc.status == http.StatusOK && body != "done" {
				t.Fatalf("body %q", body)
			}
		})
	}
}

func TestSignOutAndIdleTimeoutOverHTTP(t *testing.T) {
	s := newSite(t, false)
	_, sess := s.signIn(t, "ines", inesPassword)
	_, who := s.do(t, "GET", "/whoami", sess, nil, nil)
	token := strings.SplitN(who, "|", 2)[1]
	if resp, _ := s.do(t, "POST", "/signout", sess, nil, nil); resp.StatusCode != http.StatusForbidden {
		t.Fatalf("sign-out without the token: %d, want 403", resp.StatusCode)
	}
	resp, _ := s.do(t, "POST", "/signout", sess, nil, map[string]string{CSRFHeader: token})
	if resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("sign-out: %d", resp.StatusCode)
	}
	if c := sessionCookie(resp); c == nil || c.MaxAge >= 0 {
		t.Fatalf("sign-out did not clear the cookie: %+v", c)
	}
	if _, body := s.do(t, "GET", "/whoami", sess, nil, nil); body != "anonymous" {
		t.Fatalf("after sign-out: %q", body)
	}
	if es := s.entries(t, EventSignOut); len(es) != 1 || es[0].Actor != "ines" {
		t.Fatalf("sign-out entries = %+v", es)
	}

	_, sess = s.signIn(t, "ines", inesPassword)
	s.clock.Add(DefaultIdleTimeout)
	resp, body := s.do(t, "GET", "/whoami", sess, nil, nil)
	if body != "anonymous" {
		t.Fatalf("after %s idle: %q", DefaultIdleTimeout, body)
	}
	if c := sessionCookie(resp); c == nil || c.MaxAge >= 0 {
		t.Fatalf("timed-out cookie not cleared: %+v", c)
	}
	if resp, _ := s.do(t, "POST", "/act", sess, nil, nil); resp.StatusCode != http.StatusUnauthorized {
		t.Fatalf("action with a timed-out session: %d, want 401", resp.StatusCode)
	}
}

func TestLocalPath(t *testing.T) {
	for in, want := range map[string]string{
		"": "/", "/alarms": "/alarms", "/zones/assembly?x=1": "/zones/assembly?x=1",
		"//evil.example/": "/", `/\evil.example`: "/", "https://evil.example/": "/", "alarms": "/",
	} {
		if got := localPath(in); got != want {
			t.Errorf("localPath(%q) = %q, want %q", in, got, want)
		}
	}
}

func TestBackgroundRequestsDoNotKeepSessionAlive(t *testing.T) {
	s := newSite(t, false)
	_, sess := s.signIn(t, "ines", inesPassword)
	bg := map[string]string{BackgroundHeader: "1"}
	for i := 0; i < 2; i++ {
		s.clock.Add(5 * time.Minute)
		if _, body := s.do(t, "GET", "/whoami", sess, nil, bg); !strings.HasPrefix(body, "ines|") {
			t.Fatalf("background refresh at %d min: %q", (i+1)*5, body)
		}
	}
	s.clock.Add(5 * time.Minute)
	if _, body := s.do(t, "GET", "/whoami", sess, nil, bg); body != "anonymous" {
		t.Fatalf("15 min of only background refreshes kept the session: %q", body)
	}
}

func TestAccountChangesReachLiveSessions(t *testing.T) {
	s := newSite(t, false)
	ctx := context.Background()
	_, sess := s.signIn(t, "piotr", piotrPassword)
	if err := s.dir.SetRole(ctx, "admin", "piotr", RoleViewer, "moved to another team"); err != nil {
		t.Fatal(err)
	}
	if _, body := s.do(t, "GET", "/whoami", sess, nil, nil); !strings.HasPrefix(body, "piotr|") {
		t.Fatalf("after the role change: %q", body)
	}
	if got, ok := sessionRole(s, sess); !ok || got != RoleViewer {
		t.Fatalf("role after the change = %q (%v), want viewer", got, ok)
	}
	if err := s.dir.Disable(ctx, "admin", "piotr", "left the site"); err != nil {
		t.Fatal(err)
	}
	if _, body := s.do(t, "GET", "/whoami", sess, nil, nil); body != "anonymous" {
		t.Fatalf("a disabled account's session still works: %q", body)
	}
	if err := s.dir.Enable(ctx, "admin", "piotr", "came back"); err != nil {
		t.Fatal(err)
	}
	if _, body := s.do(t, "GET", "/whoami", sess, nil, nil); body != "anonymous" {
		t.Fatalf("re-enabling revived the old session: %q", body)
	}
}

func sessionRole(s *site, id string) (Role, bool) {
	ses, err := s.web.Sessions().Peek(id)
	if err != nil || ses.Person == nil {
		return "", false
	}
	return ses.Person.Role, true
}
