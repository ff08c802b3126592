package main

import (
	"crypto/sha256"
	"crypto/subtle"
	"encoding/hex"
	"fmt"
	"math"
	"net"
	"net/http"
	"sort"
	"strconv"
	"strings"
	"sync/atomic"
	"time"
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

// permission is what a route asks of the caller.
type permission int

const (
	permRead    permission = iota // GET endpoints
	permIngest                    // POST readings and pressure
	permOperate                   // operating-state changes and alarm acknowledgements
	permAdmin                     // backup and everything else
)

func (p permission) String() string {
	switch p {
	case permRead:
		return "read"
	case permIngest:
		return "ingest"
	case permOperate:
		return "operate"
	}
	return "administer"
}

// grants reports whether a role carries a permission. Ingest is its own
// narrow role: an instrument gateway posts readings and reads nothing.
func grants(role string, p permission) bool {
	switch role {
	case roleAdmin:
		return true
	case roleOperator:
		return p == permRead || p == permOperate
	case roleViewer:
		return p == permRead
	case roleIngest:
		return p == permIngest
	}
	return false
}

// authorizer checks bearer tokens against the SHA-256 hashes of the
// configuration and applies the per-token rate limit. Its tokens can be
// replaced while it serves (a SIGHUP reload adds and revokes tokens
// without a restart).
type authorizer struct {
	open   bool // demo: everything allowed without a token
	state  atomic.Pointer[authState]
	limits *rateLimits
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

// newAuthorizer takes the access section, already checked by loadConfig.
func newAuthorizer(a accessConfig, open bool) (*authorizer, error) {
	au := &authorizer{open: open, limits: newRateLimits(a.RateLimit)}
	if _, _, err := au.replace(a); err != nil {
		return nil, err
	}
	return au, nil
}

// replace installs the tokens of a (re)loaded access section and returns
// the names added and removed, for the audit trail.
func (a *authorizer) replace(ac accessConfig) (added, removed []string, err error) {
	st := &authState{openReads: ac.OpenReads}
	for i, t := range ac.Tokens {
		h, err := hex.DecodeString(strings.ToLower(strings.TrimSpace(t.SHA256)))
		if err != nil || len(h) != sha256.Size {
			return nil, nil, fmt.Errorf("%w: access.tokens[%d].sha256 is not a SHA-256 hex digest", errConfig, i)
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
func (a *authorizer) identify(r *http.Request) (*tokenEntry, bool) {
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

// require is the middleware guarding a route: 401 without a valid token,
// 403 when the token's role lacks the permission.
func (a *authorizer) require(p permission) func(http.Handler) http.Handler {
	return func(next http.Handler) http.Handler {
		return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			if a.open {
				next.ServeHTTP(w, r)
				return
			}
			tok, presented := a.identify(r)
			key := "addr:" + clientHost(r)
			if tok != nil {
				infoOf(r).token = tok.name
				key = "token:" + tok.name
			}
			if wait, ok := a.limits.allow(key); !ok {
				// Rounded up: a client that waits Retry-After seconds gets in.
				w.Header().Set("Retry-After", strconv.Itoa(int(math.Ceil(wait.Seconds()))))
				writeError(w, http.StatusTooManyRequests, fmt.Sprintf("rate limit: more than %g requests a second; retry in %s", a.limits.rate(), max(wait.Round(time.Millisecond), time.Millisecond)))
				return
			}
			if p == permRead && a.state.Load().openReads {
				next.ServeHTTP(w, r)
				return
			}
			if tok == nil {
				w.Header().Set("WWW-Authenticate", `Bearer realm="cleanmon"`)
				msg := "missing bearer token (Authorization: Bearer <token>)"
				if presented {
					msg = "invalid token"
				}
				writeError(w, http.StatusUnauthorized, msg)
				return
			}
			if !grants(tok.role, p) {
				writeError(w, http.StatusForbidden, fmt.Sprintf("token %q has role %s, which may not %s", tok.name, tok.role, p))
				return
			}
			next.ServeHTTP(w, r)
		})
	}
}
