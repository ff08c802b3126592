package access

import (
	"crypto/sha256"
	"crypto/subtle"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
	"net"
	"net/http"
	"sort"
	"strconv"
	"strings"
	"sync/atomic"
	"time"

	"cleanmon/cmd/cleanmon/internal/httpx"
)

// clientHost is the peer's address without the port, the rate-limit key
// of a request without a token.
func clientHost(r *http.Request) string {
	h, _, err := net.SplitHostPort(r.RemoteAddr)
	if err != nil {
		return r.RemoteAddr
	}
	return h
}

// Permission is what a route asks of the caller.
type Permission int

const (
	PermRead    Permission = iota // GET endpoints
	PermIngest                    // POST readings and pressure
	PermOperate                   // operating-state changes and alarm acknowledgements
	PermAdmin                     // backup, accounts and everything else
	// PermRecordRuns records and closes production runs: an operator at
	// the room, or the ingest token of an execution system that books
	// batches and lots.
	PermRecordRuns
	PermSign // sign certification reports (which meanings: SignMeanings)
)

// String is the verb of the permission, as the 403 answer words it.
func (p Permission) String() string {
	switch p {
	case PermRead:
		return "read"
	case PermIngest:
		return "ingest"
	case PermOperate:
		return "operate"
	case PermRecordRuns:
		return "record runs"
	case PermSign:
		return "sign reports"
	}
	return "administer"
}

// Grants reports whether a role carries a Permission. Ingest is its own
// narrow role: an instrument gateway posts readings and reads nothing. QA
// reads and signs (reviews and approvals) but does not run the rooms: it
// neither acknowledges alarms nor changes operating states, so a QA
// approval is never of QA's own operating act.
func Grants(role string, p Permission) bool {
	switch role {
	case RoleAdmin:
		return true
	case RoleOperator:
		return p == PermRead || p == PermOperate || p == PermRecordRuns || p == PermSign
	case RoleQA:
		return p == PermRead || p == PermSign
	case RoleViewer:
		return p == PermRead
	case RoleIngest:
		return p == PermIngest || p == PermRecordRuns
	}
	return false
}

// Authorizer checks bearer tokens against the SHA-256 hashes of the
// configuration and applies the per-token rate limit. Its tokens can be
// replaced while it serves (a SIGHUP reload adds and revokes tokens
// without a restart).
type Authorizer struct {
	open   bool // demo: everything allowed without a token
	state  atomic.Pointer[authState]
	limits *rateLimits
	// sigRequired: acknowledgements and state changes need a person's
	// signature (site configuration signatures_required).
	sigRequired atomic.Bool
}

// authState is one configuration's tokens, swapped whole on reload.
type authState struct {
	openReads bool
	tokens    []tokenEntry
}

type tokenEntry struct {
	name string
	role string
	hash []byte
}

// NewAuthorizer takes the access section, already checked by loadConfig.
func NewAuthorizer(a Config, open bool) (*Authorizer, error) {
	au := &Authorizer{open: open, limits: newRateLimits(a.RateLimit)}
	if _, _, err := au.Replace(a); err != nil {
		return nil, err
	}
	return au, nil
}

// Replace installs the tokens of a (re)loaded access section and returns
// the names added and removed, for the audit trail.
func (a *Authorizer) Replace(ac Config) (added, removed []string, err error) {
	st := &authState{openReads: ac.OpenReads}
	for i, t := range ac.Tokens {
		h, err := hex.DecodeString(strings.ToLower(strings.TrimSpace(t.SHA256)))
		if err != nil || len(h) != sha256.Size {
			return nil, nil, fmt.Errorf("%w: access.tokens[%d].sha256 is not a SHA-256 hex digest", ErrInvalid, i)
		}
		st.tokens = append(st.tokens, tokenEntry{name: t.Name, role: t.Role, hash: h})
	}
	old := map[string]string{}
	if prev := a.state.Load(); prev != nil {
		for _, t := range prev.tokens {
			old[t.name] = hex.EncodeToString(t.hash) + "/" + t.role
		}
	}
	for _, t := range st.tokens {
		v := hex.EncodeToString(t.hash) + "/" + t.role
		if ov, ok := old[t.name]; !ok || ov != v {
			added = append(added, t.name)
		}
		if ov, ok := old[t.name]; ok && ov != v {
			removed = append(removed, t.name) // same name, new secret or role: the old one is revoked
		}
		delete(old, t.name)
	}
	for name := range old {
		removed = append(removed, name)
	}
	sort.Strings(added)
	sort.Strings(removed)
	a.state.Store(st)
	a.limits.configure(ac.RateLimit)
	return added, removed, nil
}

// identify returns the token a request presents: (nil, false) when none,
// (nil, true) when one is presented that matches no configured hash. Every
// hash is compared in constant time and none is skipped, so the time taken
// tells nothing about which or how much matched.
func (a *Authorizer) identify(r *http.Request) (*tokenEntry, bool) {
	h := r.Header.Get("Authorization")
	if h == "" {
		return nil, false
	}
	scheme, secret, ok := strings.Cut(h, " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") || strings.TrimSpace(secret) == "" {
		return nil, true
	}
	sum := sha256.Sum256([]byte(strings.TrimSpace(secret)))
	st := a.state.Load()
	match := -1
	for i := range st.tokens {
		if subtle.ConstantTimeCompare(sum[:], st.tokens[i].hash) == 1 {
			match = i
		}
	}
	if match < 0 {
		return nil, true
	}
	return &st.tokens[match], true
}

// Require is the middleware guarding a route: 401 without a valid token
// or a signed-in person, 403 when the role lacks the Permission. A request
// with an Authorization header is judged by its token alone; one without
// is judged by the person of its session (people.Web's middleware runs
// first).
func (a *Authorizer) Require(p Permission) func(http.Handler) http.Handler {
	return func(next http.Handler) http.Handler {
		return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			id := httpx.IdentityOf(r)
			person, hasPerson := personOf(r)
			if hasPerson {
				id.User, id.FullName, id.Role = person.Name, person.FullName, string(person.Role)
			}
			if a.open {
				next.ServeHTTP(w, r)
				return
			}
			tok, presented := a.identify(r)
			key := "addr:" + clientHost(r)
			switch {
			case tok != nil:
				id.Token, id.Role = tok.name, tok.role
				key = "token:" + tok.name
			case hasPerson:
				key = "user:" + person.Name
			}
			if wait, ok := a.limits.allow(key); !ok {
				// Rounded up: a client that waits Retry-After seconds gets in.
				w.Header().Set("Retry-After", strconv.Itoa(int(math.Ceil(wait.Seconds()))))
				httpx.WriteError(w, http.StatusTooManyRequests, fmt.Sprintf("rate limit: more than %g requests a second; retry in %s", a.limits.rate(), max(wait.Round(time.Millisecond), time.Millisecond)))
				return
			}
			if p == PermRead && a.state.Load().openReads {
				next.ServeHTTP(w, r)
				return
			}
			switch {
			case tok == nil && !hasPerson:
				w.Header().Set("WWW-Authenticate", `Bearer realm="cleanmon"`)
				msg := "missing bearer token (Authorization: Bearer <token>) or sign-in"
				if presented {
					msg = "invalid token"
				}
				httpx.WriteError(w, http.StatusUnauthorized, msg)
				return
			case tok != nil && !Grants(tok.role, p):
				httpx.WriteError(w, http.StatusForbidden, fmt.Sprintf("token %q has role %s, which may not %s", tok.name, tok.role, p))
				return
			case tok == nil && !Grants(string(person.Role), p):
				httpx.WriteError(w, http.StatusForbidden, fmt.Sprintf("%s (%s) has role %s, which may not %s", person.FullName, person.Name, person.Role, p))
				return
			}
			next.ServeHTTP(w, r)
		})
	}
}

// Session is what a request's token or person may do, for the pages. It
// never holds the token, only its name and role.
type Session struct {
	Open       bool   `json:"open"`       // demo: every route open, no token asked
	OpenReads  bool   `json:"open_reads"` // reading needs no token
	SignedIn   bool   `json:"signed_in"`
	Name       string `json:"name,omitempty"`
	Role       string `json:"role,omitempty"`
	MayRead    bool   `json:"may_read"`
	MayOperate bool   `json:"may_operate"`
	// Person is set when a person is signed in on the pages (not a token).
	Person   bool   `json:"person"`
	FullName string `json:"full_name,omitempty"`
	Method   string `json:"method,omitempty"` // "password" or "oidc"
	// CSRF is the token the page's state-changing requests echo in the
	// X-CSRF-Token header; it is the session's, not a secret of the site.
	CSRF     string `json:"csrf,omitempty"`
	MayAdmin bool   `json:"may_admin"`
	// MaySign lists the signature meanings of a certification report the
	// person's role may give.
	MaySign []string `json:"may_sign"`
	// SignaturesRequired: state changes and acknowledgements need a
	// signed-in person's signature; tokens may not make them.
	SignaturesRequired bool `json:"signatures_required"`
}

// ErrInvalidToken is a request presenting a token that matches none.
var ErrInvalidToken = errors.New("invalid token")

// Session tells what r's token or person may do, or what an anonymous
// visitor may; ErrInvalidToken when r presents a token that matches none
// (open reads let such a request through Require, and the page must still
// learn its token is wrong).
func (a *Authorizer) Session(r *http.Request) (Session, error) {
	openReads := a.state.Load().openReads
	out := Session{Open: a.open, OpenReads: openReads, MaySign: []string{}, SignaturesRequired: a.SignaturesRequired()}
	tok, presented := a.identify(r)
	person, hasPerson := personOf(r)
	switch {
	case tok != nil:
		out.SignedIn, out.Name, out.Role = true, tok.name, tok.role
		out.MayRead = openReads || a.open || Grants(tok.role, PermRead)
		out.MayOperate = a.open || Grants(tok.role, PermOperate)
		out.MayAdmin = Grants(tok.role, PermAdmin)
	case presented && !a.open:
		return out, ErrInvalidToken
	case hasPerson:
		s, _ := sessionOf(r)
		role := string(person.Role)
		out.SignedIn, out.Person, out.Name, out.FullName, out.Role = true, true, person.Name, person.FullName, role
		out.Method, out.CSRF = s.Method, s.CSRF
		out.MayRead = openReads || a.open || Grants(role, PermRead)
		out.MayOperate = Grants(role, PermOperate)
		out.MayAdmin = Grants(role, PermAdmin)
		out.MaySign = SignMeanings(role)
	default:
		out.MayRead = openReads || a.open
		out.MayOperate = a.open
	}
	return out, nil
}
