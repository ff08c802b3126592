package people

import (
	"context"
	"crypto/subtle"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"strings"
)

// Names the pages and their scripts use.
const (
	CookieName = "cleanmon_session" // the session cookie
	CSRFHeader = "X-CSRF-Token"     // header carrying the session's token (fetch)
	CSRFField  = "csrf_token"       // form field carrying it (plain forms)
	// BackgroundHeader, with any value, marks a request the page sends by
	// itself (a periodic refresh): it does not count as activity for the
	// idle time-out.
	BackgroundHeader = "X-Cleanmon-Background"
)

// Web holds what the sign-in handlers and the session middleware share.
type Web struct {
	dir      *Directory
	sessions *Sessions
	audit    AuditSink
	cop      *http.CrossOriginProtection
	secure   bool
	fail     func(w http.ResponseWriter, r *http.Request, status int, err error)
}

// WebConfig configures NewWeb.
type WebConfig struct {
	// SecureCookies marks the cookie Secure even when the request did not
	// come over TLS here (TLS ends at a proxy in front). Requests that do
	// come over TLS always get Secure.
	SecureCookies bool
	// TrustedOrigins are other origins ("https://host:port") whose pages
	// may post here, e.g. the public name of a proxy. Same-origin
	// requests need no entry.
	TrustedOrigins []string
	// Fail writes an error page or JSON; nil: plain text.
	Fail func(w http.ResponseWriter, r *http.Request, status int, err error)
}

// NewWeb returns the web side of dir and sessions. audit receives
// sign-in and sign-out events.
func NewWeb(dir *Directory, sessions *Sessions, audit AuditSink, cfg WebConfig) (*Web, error) {
	cop := http.NewCrossOriginProtection()
	for _, o := range cfg.TrustedOrigins {
		if err := cop.AddTrustedOrigin(o); err != nil {
			return nil, fmt.Errorf("%w: trusted origin %q: %w", ErrInvalid, o, err)
		}
	}
	fail := cfg.Fail
	if fail == nil {
		fail = func(w http.ResponseWriter, _ *http.Request, status int, err error) {
			http.Error(w, err.Error(), status)
		}
	}
	return &Web{dir: dir, sessions: sessions, audit: audit, cop: cop, secure: cfg.SecureCookies, fail: fail}, nil
}

// Sessions returns the session table, for sign-out of a disabled person.
func (w *Web) Sessions() *Sessions { return w.sessions }

type ctxKey struct{}

// FromContext returns the session the middleware found, if any.
func FromContext(ctx context.Context) (Session, bool) {
	s, ok := ctx.Value(ctxKey{}).(Session)
	return s, ok
}

func safeMethod(m string) bool {
	return m == http.MethodGet || m == http.MethodHead || m == http.MethodOptions
}

// CheckCSRF refuses a state-changing request of session s that comes
// from another origin (Sec-Fetch-Site or Origin, the standard library's
// check) or does not carry s's token in the CSRFHeader header or the
// CSRFField form field, compared in constant time. Safe methods pass.
func (w *Web) CheckCSRF(r *http.Request, s Session) error {
	if safeMethod(r.Method) {
		return nil
	}
	if err := w.cop.Check(r); err != nil {
		return fmt.Errorf("%w: %v", ErrCSRF, err)
	}
	got := r.Header.Get(CSRFHeader)
	if got == "" && strings.HasPrefix(r.Header.Get("Content-Type"), "application/x-www-form-urlencoded") {
		got = r.PostFormValue(CSRFField)
	}
	if got == "" || subtle.ConstantTimeCompare([]byte(got), []byte(s.CSRF)) != 1 {
		return fmt.Errorf("%w: token missing or wrong", ErrCSRF)
	}
	return nil
}

// Middleware finds the session of the request's cookie and puts it in
// the context (FromContext). A state-changing request that carries a
// live session must pass CheckCSRF, or it gets 403 and goes no further.
// A timed-out session's cookie is cleared. Requests without a session
// (machines with bearer tokens) pass untouched: the access layer judges
// them.
func (w *Web) Middleware(next http.Handler) http.Handler {
	return http.HandlerFunc(func(rw http.ResponseWriter, r *http.Request) {
		c, err := r.Cookie(CookieName)
		if err != nil || c.Value == "" {
			next.ServeHTTP(rw, r)
			return
		}
		get := w.sessions.Get
		if r.Header.Get(BackgroundHeader) != "" {
			get = w.sessions.Peek
		}
		s, err := get(c.Value)
		if err == nil {
			s, err = w.current(s)
		}
		if err != nil {
			w.clearCookie(rw, r)
			next.ServeHTTP(rw, r)
			return
		}
		if err := w.CheckCSRF(r, s); err != nil {
			w.fail(rw, r, http.StatusForbidden, err)
			return
		}
		next.ServeHTTP(rw, r.WithContext(context.WithValue(r.Context(), ctxKey{}, s)))
	})
}

// current re-reads the account of a signed-in session, so that disabling
// or locking an account ends its sessions at their next request and a
// changed role or full name applies at once. An account that cannot be
// read ends the session: fail safe.
func (w *Web) current(s Session) (Session, error) {
	if s.Person == nil || w.dir == nil {
		return s, nil
	}
	a, err := w.dir.Lookup(s.Person.Name)
	switch {
	case err != nil:
		w.sessions.End(s.ID)
		return Session{}, err
	case a.Disabled || a.Locked:
		w.sessions.End(s.ID)
		return Session{}, fmt.Errorf("%w: account %s is disabled or locked", ErrNoSession, a.Name)
	}
	p := *s.Person
	if p.Role != Role(a.Role) || p.FullName != a.FullName {
		p.Role, p.FullName = Role(a.Role), a.FullName
		w.sessions.Update(s.ID, p)
		s.Person = &p
	}
	return s, nil
}

// PreSession returns the request's session, starting a pre-sign-in one
// (and setting its cookie) when there is none: the sign-in page puts its
// CSRF token into the form.
func (w *Web) PreSession(rw http.ResponseWriter, r *http.Request) (Session, error) {
	if c, err := r.Cookie(CookieName); err == nil {
		if s, err := w.sessions.Get(c.Value); err == nil {
			return s, nil
		}
	}
	s, err := w.sessions.Begin()
	if err != nil {
		return Session{}, err
	}
	w.setCookie(rw, r, s.ID)
	return s, nil
}

// cookie is the one place the cookie's attributes are set: HttpOnly so
// scripts cannot read it, SameSite=Strict so no other site's page sends
// it, Secure under TLS, no expiry (the server times sessions out).
func (w *Web) cookie(r *http.Request, value string) *http.Cookie {
	return &http.Cookie{
		Name: CookieName, Value: value, Path: "/", HttpOnly: true,
		Secure: w.secure || r.TLS != nil, SameSite: http.SameSiteStrictMode,
	}
}

func (w *Web) setCookie(rw http.ResponseWriter, r *http.Request, id string) {
	http.SetCookie(rw, w.cookie(r, id))
}

func (w *Web) clearCookie(rw http.ResponseWriter, r *http.Request) {
	c := w.cookie(r, "")
	c.MaxAge = -1
	http.SetCookie(rw, c)
}

// HandleSignIn takes a form post of name, password and the pre-sign-in
// session's CSRF token. On success the old session ends, a new one with
// a new ID is set, and the browser is sent (303) to the form's "next"
// path if it is a local path, else "/".
func (w *Web) HandleSignIn(rw http.ResponseWriter, r *http.Request) {
	if r.Method != http.MethodPost {
		w.fail(rw, r, http.StatusMethodNotAllowed, fmt.Errorf("%w: sign in with POST", ErrInvalid))
		return
	}
	pre, err := w.requestSession(r)
	if err != nil {
		w.fail(rw, r, http.StatusForbidden, fmt.Errorf("%w: open the sign-in page first (%v)", ErrCSRF, err))
		return
	}
	if err := w.CheckCSRF(r, pre); err != nil {
		w.fail(rw, r, http.StatusForbidden, err)
		return
	}
	p, err := w.dir.Authenticate(r.Context(), r.PostFormValue("name"), r.PostFormValue("password"))
	if err != nil {
		w.fail(rw, r, signInStatus(err), err)
		return
	}
	w.startSession(rw, r, pre.ID, p, "password")
}

// startSession replaces the pre-sign-in session, records the sign-in
// and redirects.
func (w *Web) startSession(rw http.ResponseWriter, r *http.Request, oldID string, p Person, method string) {
	s, err := w.sessions.SignIn(oldID, p, method)
	if err != nil {
		w.fail(rw, r, http.StatusServiceUnavailable, err)
		return
	}
	if w.audit != nil {
		if _, err := w.audit.Record(r.Context(), Event{Time: s.Created, Actor: p.Name, Action: EventSignIn,
			Subject: p.Name, Detail: "method: " + method + "\nrole: " + string(p.Role)}); err != nil {
			w.sessions.End(s.ID)
			w.fail(rw, r, http.StatusServiceUnavailable, fmt.Errorf("people: sign-in not recorded, so refused: %w", err))
			return
		}
	}
	w.setCookie(rw, r, s.ID)
	http.Redirect(rw, r, localPath(r.PostFormValue("next")), http.StatusSeeOther)
}

func signInStatus(err error) int {
	switch {
	case errors.Is(err, ErrBadCredentials):
		return http.StatusUnauthorized
	case errors.Is(err, ErrLocked), errors.Is(err, ErrDisabled):
		return http.StatusForbidden
	case errors.Is(err, ErrBusy):
		return http.StatusServiceUnavailable
	}
	return http.StatusInternalServerError
}

// HandleSignOut ends the session (a POST, CSRF-checked) and sends the
// browser to "/".
func (w *Web) HandleSignOut(rw http.ResponseWriter, r *http.Request) {
	if r.Method != http.MethodPost {
		w.fail(rw, r, http.StatusMethodNotAllowed, fmt.Errorf("%w: sign out with POST", ErrInvalid))
		return
	}
	s, err := w.requestSession(r)
	if err == nil {
		if err := w.CheckCSRF(r, s); err != nil {
			w.fail(rw, r, http.StatusForbidden, err)
			return
		}
		w.sessions.End(s.ID)
		if s.Person != nil && w.audit != nil {
			_, _ = w.audit.Record(r.Context(), Event{Time: w.sessions.clock.Now(), Actor: s.Person.Name, Action: EventSignOut, Subject: s.Person.Name})
		}
	}
	w.clearCookie(rw, r)
	http.Redirect(rw, r, "/", http.StatusSeeOther)
}

func (w *Web) requestSession(r *http.Request) (Session, error) {
	if s, ok := FromContext(r.Context()); ok {
		return s, nil
	}
	c, err := r.Cookie(CookieName)
	if err != nil {
		return Session{}, ErrNoSession
	}
	return w.sessions.Get(c.Value)
}

// localPath keeps a redirect on this site: a path starting with one
// slash, not "//" or "/\" (which browsers read as another host).
func localPath(next string) string {
	if next == "" || next[0] != '/' || strings.HasPrefix(next, "//") || strings.HasPrefix(next, `/\`) {
		return "/"
	}
	u, err := url.Parse(next)
	if err != nil || u.Host != "" || u.Scheme != "" {
		return "/"
	}
	return next
}
