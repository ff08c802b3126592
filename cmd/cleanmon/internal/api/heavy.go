package api

import (
	"fmt"
	"net/http"
	"strconv"
	"sync"

	"cleanmon/cmd/cleanmon/internal/httpx"
)

// DefaultHeavyPerToken is how many heavy queries (range walks over stored
// readings) one token may run at once when Options.HeavyPerToken is zero.
// Two lets a dashboard refresh while an export runs; more from one token
// would only share the same two cores and the store's read bandwidth.
const DefaultHeavyPerToken = 2

// heavyRetryAfter is the Retry-After of a refused heavy query, in seconds:
// about what a year of one location takes to stream.
const heavyRetryAfter = 2

// heavyGate bounds the heavy queries running per token. A query beyond the
// bound is refused at once with 429 and Retry-After rather than queued: a
// queue would hold the connection and its timeout while the client could
// as well retry, and a refused query has read nothing.
type heavyGate struct {
	per     int
	mu      sync.Mutex
	running map[string]int
}

func newHeavyGate(per int) *heavyGate {
	if per <= 0 {
		per = DefaultHeavyPerToken
	}
	return &heavyGate{per: per, running: map[string]int{}}
}

// limit is the middleware; it runs after the access check, so the token
// is known (requests without one share the name "").
func (g *heavyGate) limit(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		tok := httpx.IdentityOf(r).Token
		g.mu.Lock()
		n := g.running[tok]
		if n >= g.per {
			g.mu.Unlock()
			w.Header().Set("Retry-After", strconv.Itoa(heavyRetryAfter))
			httpx.WriteError(w, http.StatusTooManyRequests,
				fmt.Sprintf("%d heavy queries of this token are running already (at most %d at once); retry later", n, g.per))
			return
		}
		g.running[tok] = n + 1
		g.mu.Unlock()
		defer func() {
			g.mu.Lock()
			if g.running[tok]--; g.running[tok] == 0 {
				delete(g.running, tok)
			}
			g.mu.Unlock()
		}()
		next.ServeHTTP(w, r)
	})
}
