package people

import (
	"context"
	"errors"
	"fmt"
	"html/template"
	"net/http"
	"strings"
	"sync"
	"time"

	"github.com/coreos/go-oidc/v3/oidc"
	"golang.org/x/oauth2"
)

// FlightCookie carries the random ID of an OIDC round trip in flight.
// It is SameSite=Lax, unlike the session cookie: the provider's redirect
// back is a navigation from another site, on which browsers do not send
// Strict cookies. It grants nothing by itself.
const FlightCookie = "cleanmon_oidc"

// RoleRule maps one value of the role claim to a role.
type RoleRule struct {
	Value string
	Role  Role
}

// OIDCConfig configures sign-in through an OpenID Connect provider.
type OIDCConfig struct {
	Issuer       string // the provider's issuer URL, as in its discovery document
	ClientID     string
	ClientSecret string
	RedirectURL  string   // this daemon's callback, registered at the provider
	Scopes       []string // added to "openid"; e.g. "profile" and the scope that carries the role claim
	// NameClaim gives the account name (default "preferred_username");
	// it is lower-cased and must pass CheckName.
	NameClaim string
	// FullNameClaim gives the full name (default "name").
	FullNameClaim string
	// RoleClaim names the claim holding a string or a list of strings;
	// a dotted path reaches into objects ("realm_access.roles"). A claim
	// whose own name has a dot is found before the path is walked.
	RoleClaim string
	// Roles map claim values to roles, first match in this order wins;
	// a person none matches is refused, never given a default role.
	Roles []RoleRule
	// HTTPClient talks to the provider (nil: http.DefaultClient).
	HTTPClient *http.Client
}

// OIDC is sign-in through an identity provider: the authorisation code
// flow with PKCE (S256), a state bound to a flight cookie, and a nonce
// bound to the ID token.
type OIDC struct {
	cfg      OIDCConfig
	oauth    oauth2.Config
	verifier *oidc.IDTokenVerifier
	web      *Web
	clock    Clock

	mu      sync.Mutex
	flights map[string]*flight
}

// flight is one round trip to the provider.
type flight struct {
	state, nonce, verifier string
	sessionID              string // the session that started it
	reauth                 bool   // a fresh sign-in before a signature
	next                   string
	started                time.Time
}

// maxFlights bounds the round trips in flight at once.
const maxFlights = 1000

// NewOIDC discovers the provider (a request to its
// /.well-known/openid-configuration) and returns the sign-in side.
func NewOIDC(ctx context.Context, cfg OIDCConfig, web *Web, clock Clock) (*OIDC, error) {
	if cfg.Issuer == "" || cfg.ClientID == "" || cfg.RedirectURL == "" || cfg.RoleClaim == "" || len(cfg.Roles) == 0 {
		return nil, fmt.Errorf("%w: oidc: issuer, client_id, redirect_url, role_claim and at least one role mapping are required", ErrInvalid)
	}
	for i, r := range cfg.Roles {
		if _, err := ParseRole(string(r.Role)); err != nil {
			return nil, fmt.Errorf("oidc: roles[%d]: %w", i, err)
		}
	}
	if cfg.NameClaim == "" {
		cfg.NameClaim = "preferred_username"
	}
	if cfg.FullNameClaim == "" {
		cfg.FullNameClaim = "name"
	}
	if cfg.HTTPClient == nil {
		cfg.HTTPClient = http.DefaultClient
	}
	if clock == nil {
		clock = SystemClock
	}
	provider, err := oidc.NewProvider(oidc.ClientContext(ctx, cfg.HTTPClient), cfg.Issuer)
	if err != nil {
		return nil, fmt.Errorf("%w: discovery at %s: %w", ErrOIDC, cfg.Issuer, err)
	}
	o := &OIDC{
		cfg: cfg, web: web, clock: clock, flights: map[string]*flight{},
		oauth: oauth2.Config{
			ClientID: cfg.ClientID, ClientSecret: cfg.ClientSecret, RedirectURL: cfg.RedirectURL,
			Endpoint: provider.Endpoint(), Scopes: append([]string{oidc.ScopeOpenID}, cfg.Scopes...),
		},
		verifier: provider.Verifier(&oidc.Config{ClientID: cfg.ClientID, Now: clock.Now}),
	}
	return o, nil
}

// HandleStart sends the browser to the provider. With "reauth=1" a
// signed-in person must sign in at the provider again (prompt=login,
// max_age=0) before a signature; "next" is where to return to.
func (o *OIDC) HandleStart(rw http.ResponseWriter, r *http.Request) {
	reauth := r.URL.Query().Get("reauth") == "1"
	s, err := o.web.PreSession(rw, r)
	if err != nil {
		o.web.fail(rw, r, http.StatusServiceUnavailable, err)
		return
	}
	if reauth && s.Person == nil {
		o.web.fail(rw, r, http.StatusUnauthorized, fmt.Errorf("%w: sign in first", ErrReauth))
		return
	}
	f := &flight{sessionID: s.ID, reauth: reauth, next: localPath(r.URL.Query().Get("next")),
		started: o.clock.Now(), verifier: oauth2.GenerateVerifier()}
	id, err1 := randomToken()
	state, err2 := randomToken()
	nonce, err3 := randomToken()
	if err := firstErr(err1, err2, err3); err != nil {
		o.web.fail(rw, r, http.StatusInternalServerError, err)
		return
	}
	f.state, f.nonce = state, nonce
	if err := o.putFlight(id, f); err != nil {
		o.web.fail(rw, r, http.StatusServiceUnavailable, err)
		return
	}
	http.SetCookie(rw, &http.Cookie{Name: FlightCookie, Value: id, Path: "/", HttpOnly: true,
		Secure: o.web.secure || r.TLS != nil, SameSite: http.SameSiteLaxMode, MaxAge: int(PreSignInTimeout / time.Second)})
	opts := []oauth2.AuthCodeOption{oidc.Nonce(nonce), oauth2.S256ChallengeOption(f.verifier)}
	if reauth {
		opts = append(opts, oauth2.SetAuthURLParam("prompt", "login"), oauth2.SetAuthURLParam("max_age", "0"))
	}
	http.Redirect(rw, r, o.oauth.AuthCodeURL(state, opts...), http.StatusFound)
}

func firstErr(errs ...error) error {
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}

func (o *OIDC) putFlight(id string, f *flight) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	now := o.clock.Now()
	for k, old := range o.flights {
		if now.Sub(old.started) >= PreSignInTimeout {
			delete(o.flights, k)
		}
	}
	if len(o.flights) >= maxFlights {
		return fmt.Errorf("%w: %d sign-ins through the provider in flight", ErrBusy, len(o.flights))
	}
	o.flights[id] = f
	return nil
}

// takeFlight removes the flight, so each callback works once.
func (o *OIDC) takeFlight(id string) (*flight, bool) {
	o.mu.Lock()
	defer o.mu.Unlock()
	f, ok := o.flights[id]
	delete(o.flights, id)
	if ok && o.clock.Now().Sub(f.started) >= PreSignInTimeout {
		return nil, false
	}
	return f, ok
}

// HandleCallback finishes the round trip: checks state, exchanges the
// code with the PKCE verifier, verifies the ID token and its nonce, maps
// the role, binds the account, and starts a new session (or, for a
// re-authentication, marks the session fresh). It answers with a page
// that moves on to "next" by itself, so the first page after it is a
// same-site navigation that carries the Strict session cookie.
func (o *OIDC) HandleCallback(rw http.ResponseWriter, r *http.Request) {
	c, err := r.Cookie(FlightCookie)
	if err != nil {
		o.web.fail(rw, r, http.StatusBadRequest, fmt.Errorf("%w: no sign-in in flight (cookie missing)", ErrOIDC))
		return
	}
	http.SetCookie(rw, &http.Cookie{Name: FlightCookie, Value: "", Path: "/", MaxAge: -1, HttpOnly: true})
	f, ok := o.takeFlight(c.Value)
	if !ok {
		o.web.fail(rw, r, http.StatusBadRequest, fmt.Errorf("%w: sign-in unknown, used or timed out; start again", ErrOIDC))
		return
	}
	q := r.URL.Query()
	if e := q.Get("error"); e != "" {
		o.web.fail(rw, r, http.StatusUnauthorized, fmt.Errorf("%w: provider said %s: %s", ErrOIDC, e, q.Get("error_description")))
		return
	}
	if q.Get("state") != f.state {
		o.web.fail(rw, r, http.StatusBadRequest, fmt.Errorf("%w: state does not match", ErrOIDC))
		return
	}
	p, authTime, err := o.exchange(r.Context(), q.Get("code"), f)
	if err != nil {
		o.web.fail(rw, r, oidcStatus(err), err)
		return
	}
	if f.reauth {
		o.finishReauth(rw, r, f, p, authTime)
		return
	}
	s, err := o.web.sessions.SignIn(f.sessionID, p, "oidc")
	if err != nil {
		o.web.fail(rw, r, http.StatusServiceUnavailable, err)
		return
	}
	if o.web.audit != nil {
		if _, err := o.web.audit.Record(r.Context(), Event{Time: s.Created, Actor: p.Name, Action: EventSignIn,
			Subject: p.Name, Detail: "method: oidc\nissuer: " + p.Issuer + "\nrole: " + string(p.Role)}); err != nil {
			o.web.sessions.End(s.ID)
			o.web.fail(rw, r, http.StatusServiceUnavailable, fmt.Errorf("people: sign-in not recorded, so refused: %w", err))
			return
		}
	}
	o.web.setCookie(rw, r, s.ID)
	writeOnward(rw, f.next)
}

func (o *OIDC) finishReauth(rw http.ResponseWriter, r *http.Request, f *flight, p Person, authTime time.Time) {
	s, err := o.web.sessions.Get(f.sessionID)
	switch {
	case err != nil:
		o.web.fail(rw, r, http.StatusUnauthorized, err)
	case s.Person == nil || s.Person.Name != p.Name || s.Person.Issuer != p.Issuer:
		o.web.fail(rw, r, http.StatusForbidden, fmt.Errorf("%w: signed in at the provider as %s, not as the person of this session", ErrReauth, p.Name))
	case authTime.Before(f.started.Add(-time.Minute)):
		o.web.fail(rw, r, http.StatusForbidden, fmt.Errorf("%w: the provider did not ask for the password again", ErrReauth))
	default:
		o.web.sessions.Reauthenticated(f.sessionID)
		writeOnward(rw, f.next)
	}
}

var onward = template.Must(template.New("onward").Parse(`<!doctype html><meta charset="utf-8">` +
	`<meta http-equiv="refresh" content="0;url={{.}}"><title>Signed in</title><p><a href="{{.}}">Continue</a>`))

func writeOnward(rw http.ResponseWriter, next string) {
	rw.Header().Set("Content-Type", "text/html; charset=utf-8")
	rw.Header().Set("Cache-Control", "no-store")
	_ = onward.Execute(rw, next)
}

func oidcStatus(err error) int {
	if errors.Is(err, ErrDisabled) || errors.Is(err, ErrExists) {
		return http.StatusForbidden
	}
	return http.StatusUnauthorized
}

// exchange turns the code into a verified person.
func (o *OIDC) exchange(ctx context.Context, code string, f *flight) (Person, time.Time, error) {
	ctx = oidc.ClientContext(ctx, o.cfg.HTTPClient)
	ctx = context.WithValue(ctx, oauth2.HTTPClient, o.cfg.HTTPClient)
	tok, err := o.oauth.Exchange(ctx, code, oauth2.VerifierOption(f.verifier))
	if err != nil {
		return Person{}, time.Time{}, fmt.Errorf("%w: code exchange: %w", ErrOIDC, err)
	}
	raw, ok := tok.Extra("id_token").(string)
	if !ok {
		return Person{}, time.Time{}, fmt.Errorf("%w: token response has no id_token", ErrOIDC)
	}
	idt, err := o.verifier.Verify(ctx, raw)
	if err != nil {
		return Person{}, time.Time{}, fmt.Errorf("%w: ID token: %w", ErrOIDC, err)
	}
	if idt.Nonce != f.nonce {
		return Person{}, time.Time{}, fmt.Errorf("%w: ID token nonce does not match", ErrOIDC)
	}
	var claims map[string]any
	if err := idt.Claims(&claims); err != nil {
		return Person{}, time.Time{}, fmt.Errorf("%w: ID token claims: %w", ErrOIDC, err)
	}
	id, err := o.identity(idt.Issuer, idt.Subject, claims)
	if err != nil {
		return Person{}, time.Time{}, err
	}
	p, err := o.web.dir.SignInExternal(ctx, id)
	var authTime time.Time
	if v, ok := claims["auth_time"].(float64); ok {
		authTime = time.Unix(int64(v), 0)
	}
	return p, authTime, err
}

// identity reads name, full name and role from the claims.
func (o *OIDC) identity(issuer, subject string, claims map[string]any) (External, error) {
	name, _ := claimAt(claims, o.cfg.NameClaim).(string)
	full, _ := claimAt(claims, o.cfg.FullNameClaim).(string)
	e := External{Issuer: issuer, Subject: subject, Name: strings.ToLower(name), FullName: full}
	var values []string
	switch v := claimAt(claims, o.cfg.RoleClaim).(type) {
	case string:
		values = []string{v}
	case []any:
		for _, x := range v {
			if s, ok := x.(string); ok {
				values = append(values, s)
			}
		}
	}
	for _, rule := range o.cfg.Roles {
		for _, v := range values {
			if v == rule.Value {
				e.Role = rule.Role
				return e, nil
			}
		}
	}
	return External{}, fmt.Errorf("%w: claim %q of %s holds %q, which maps to no role", ErrOIDC, o.cfg.RoleClaim, e.Name, values)
}

// claimAt finds a claim by its name, or else by a dotted path through
// nested objects.
func claimAt(claims map[string]any, path string) any {
	if v, ok := claims[path]; ok {
		return v
	}
	cur := any(claims)
	for _, part := range strings.Split(path, ".") {
		m, ok := cur.(map[string]any)
		if !ok {
			return nil
		}
		cur = m[part]
	}
	return cur
}
