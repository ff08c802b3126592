package main

import (
	"crypto/sha256"
	"crypto/subtle"
	"encoding/hex"
	"fmt"
	"net/http"
	"strings"
)

// permission is what a route asks of the caller.
type permission int

const (
	permRead    permission = iota // GET endpoints
	permIngest                    // POST readings and pressure
	permOperate                   // operating-state changes, later alarm acks
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
// configuration.
type authorizer struct {
	open      bool // demo: everything allowed without a token
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
	au := &authorizer{open: open, openReads: a.OpenReads}
	for i, t := range a.Tokens {
		h, err := hex.DecodeString(strings.ToLower(strings.TrimSpace(t.SHA256)))
		if err != nil || len(h) != sha256.Size {
			return nil, fmt.Errorf("%w: access.tokens[%d].sha256 is not a SHA-256 hex digest", errConfig, i)
		}
		au.tokens = append(au.tokens, tokenEntry{name: t.Name, role: t.Role, hash: h})
	}
	return au, nil
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
	match := -1
	for i := range a.tokens {
		if subtle.ConstantTimeCompare(sum[:], a.tokens[i].hash) == 1 {
			match = i
		}
	}
	if match < 0 {
		return nil, true
	}
	return &a.tokens[match], true
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
			if tok != nil {
				infoOf(r).token = tok.name
			}
			if p == permRead && a.openReads {
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
