package access

import (
	"sync"
	"time"

	"golang.org/x/time/rate"
)

// RateLimitConfig is access.rate_limit: requests a second allowed to each
// token (and to each client address that presents none), with a burst.
type RateLimitConfig struct {
	// RequestsPerSecond is the sustained rate (default 200; a gateway
	// posting batches of 1 000 readings needs a few dozen).
	RequestsPerSecond float64 `yaml:"requests_per_second"`
	// Burst is how many requests may come at once (default 2 × the rate).
	Burst int `yaml:"burst"`
	// Disabled turns the limit off (a bench, a closed instrument network).
	Disabled bool `yaml:"disabled"`
}

const (
	defaultRatePerSecond = 200
	// maxLimiters bounds the per-address limiters kept for requests
	// without a token, so that a scan of addresses cannot fill memory.
	maxLimiters = 10000
)

// rateLimits keeps one token bucket per key.
type rateLimits struct {
	mu       sync.Mutex
	cfg      RateLimitConfig
	limiters map[string]*rate.Limiter
}

func newRateLimits(c RateLimitConfig) *rateLimits {
	l := &rateLimits{limiters: map[string]*rate.Limiter{}}
	l.configure(c)
	return l
}

// configure applies a (re)loaded configuration; buckets start afresh.
func (l *rateLimits) configure(c RateLimitConfig) {
	if c.RequestsPerSecond <= 0 {
		c.RequestsPerSecond = defaultRatePerSecond
	}
	if c.Burst <= 0 {
		c.Burst = int(2 * c.RequestsPerSecond)
	}
	l.mu.Lock()
	l.cfg = c
	clear(l.limiters)
	l.mu.Unlock()
}

func (l *rateLimits) rate() float64 {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.cfg.RequestsPerSecond
}

// allow takes one request for key, or says how long to wait.
func (l *rateLimits) allow(key string) (time.Duration, bool) {
	l.mu.Lock()
	if l.cfg.Disabled {
		l.mu.Unlock()
		return 0, true
	}
	lim := l.limiters[key]
	if lim == nil {
		if len(l.limiters) >= maxLimiters {
			clear(l.limiters)
		}
		lim = rate.NewLimiter(rate.Limit(l.cfg.RequestsPerSecond), l.cfg.Burst)
		l.limiters[key] = lim
	}
	l.mu.Unlock()
	now := time.Now()
	res := lim.ReserveN(now, 1)
	if d := res.DelayFrom(now); d > 0 {
		res.CancelAt(now) // not taken: the client is told to come back
		return d, false
	}
	return 0, true
}
