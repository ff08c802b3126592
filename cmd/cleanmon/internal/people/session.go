package people

import (
	"crypto/rand"
	"crypto/sha256"
	"encoding/base64"
	"fmt"
	"sync"
	"time"
)

// Session time-outs. Annex 11 and Part 11 ask for automatic log-off
// without fixing a figure; 15 minutes idle is the site default people
// expect on a shared terminal, and 12 hours covers one long shift
// (common practice, no source).
const (
	DefaultIdleTimeout     = 15 * time.Minute
	DefaultAbsoluteTimeout = 12 * time.Hour
	// PreSignInTimeout bounds a session that has not signed in yet (the
	// sign-in form, an OIDC round trip in flight).
	PreSignInTimeout = 10 * time.Minute
	// DefaultMaxSessions bounds the sessions held in memory, so a flood
	// of sign-in forms cannot exhaust it.
	DefaultMaxSessions = 10000
)

// SessionConfig tunes Sessions; zero fields take the defaults.
type SessionConfig struct {
	IdleTimeout     time.Duration
	AbsoluteTimeout time.Duration
	MaxSessions     int
}

// Session is one browser's state. A session without a Person is the
// pre-sign-in session: it carries the CSRF token of the sign-in form and
// the state of an OIDC round trip, and is replaced at sign-in.
type Session struct {
	ID       string    // the cookie value; 256 random bits
	CSRF     string    // the token state-changing requests must echo
	Person   *Person   // nil before sign-in
	Created  time.Time // for the absolute time-out
	LastSeen time.Time // for the idle time-out
	AuthTime time.Time // when the person last proved who they are
	Method   string    // "password" or "oidc"
}

// SignedIn reports whether a person is signed in.
func (s Session) SignedIn() bool { return s.Person != nil }

// Sessions holds the sessions in memory.
type Sessions struct {
	cfg   SessionConfig
	clock Clock
	mu    sync.Mutex
	byID  map[[32]byte]*Session // keyed by SHA-256 of the ID
}

// NewSessions returns an empty session table. clock nil: SystemClock.
func NewSessions(cfg SessionConfig, clock Clock) *Sessions {
	if cfg.IdleTimeout <= 0 {
		cfg.IdleTimeout = DefaultIdleTimeout
	}
	if cfg.AbsoluteTimeout <= 0 {
		cfg.AbsoluteTimeout = DefaultAbsoluteTimeout
	}
	if cfg.MaxSessions <= 0 {
		cfg.MaxSessions = DefaultMaxSessions
	}
	if clock == nil {
		clock = SystemClock
	}
	return &Sessions{cfg: cfg, clock: clock, byID: map[[32]byte]*Session{}}
}

// Config returns the configuration in force, defaults filled in.
func (m *Sessions) Config() SessionConfig { return m.cfg }

func randomToken() (string, error) {
	b := make([]byte, 32)
	if _, err := rand.Read(b); err != nil {
		return "", fmt.Errorf("people: random: %w", err)
	}
	return base64.RawURLEncoding.EncodeToString(b), nil
}

func idKey(id string) [32]byte { return sha256.Sum256([]byte(id)) }

// Begin starts a pre-sign-in session.
func (m *Sessions) Begin() (Session, error) { return m.insert(nil, "", time.Time{}) }

func (m *Sessions) insert(p *Person, method string, authTime time.Time) (Session, error) {
	id, err := randomToken()
	if err != nil {
		return Session{}, err
	}
	csrf, err := randomToken()
	if err != nil {
		return Session{}, err
	}
	now := m.clock.Now()
	s := &Session{ID: id, CSRF: csrf, Person: p, Created: now, LastSeen: now, AuthTime: authTime, Method: method}
	m.mu.Lock()
	defer m.mu.Unlock()
	if len(m.byID) >= m.cfg.MaxSessions {
		m.sweepLocked(now)
		if len(m.byID) >= m.cfg.MaxSessions {
			return Session{}, fmt.Errorf("%w: %d sessions open", ErrBusy, len(m.byID))
		}
	}
	m.byID[idKey(id)] = s
	return *s, nil
}

// expiredLocked says why s has timed out at now, or "".
func (m *Sessions) expiredLocked(s *Session, now time.Time) string {
	absolute, idle := m.cfg.AbsoluteTimeout, m.cfg.IdleTimeout
	if s.Person == nil {
		absolute, idle = PreSignInTimeout, PreSignInTimeout
	}
	switch {
	case now.Sub(s.Created) >= absolute:
		return fmt.Sprintf("signed in more than %s ago", absolute)
	case now.Sub(s.LastSeen) >= idle:
		return fmt.Sprintf("idle for more than %s", idle)
	}
	return ""
}

func (m *Sessions) sweepLocked(now time.Time) {
	for k, s := range m.byID {
		if m.expiredLocked(s, now) != "" {
			delete(m.byID, k)
		}
	}
}

// Get returns the live session with this ID and marks it seen now. An
// unknown ID gives ErrNoSession; a timed-out session is removed and
// gives ErrExpired.
func (m *Sessions) Get(id string) (Session, error) { return m.get(id, true) }

// Peek is Get without marking the session seen: a page's automatic
// refresh must not keep an unattended terminal signed in.
func (m *Sessions) Peek(id string) (Session, error) { return m.get(id, false) }

func (m *Sessions) get(id string, touch bool) (Session, error) {
	now := m.clock.Now()
	m.mu.Lock()
	defer m.mu.Unlock()
	k := idKey(id)
	s, ok := m.byID[k]
	if !ok {
		return Session{}, ErrNoSession
	}
	if why := m.expiredLocked(s, now); why != "" {
		delete(m.byID, k)
		return Session{}, fmt.Errorf("%w: %s", ErrExpired, why)
	}
	if touch {
		s.LastSeen = now
	}
	return *s, nil
}

// SignIn ends the session oldID (if any) and starts a new one for p,
// with a new ID and a new CSRF token: an ID planted in a browser before
// sign-in is worthless after it.
func (m *Sessions) SignIn(oldID string, p Person, method string) (Session, error) {
	if oldID != "" {
		m.End(oldID)
	}
	return m.insert(&p, method, m.clock.Now())
}

// Update replaces the person of a signed-in session (a changed role or
// full name); false if the session is gone.
func (m *Sessions) Update(id string, p Person) bool {
	m.mu.Lock()
	defer m.mu.Unlock()
	s, ok := m.byID[idKey(id)]
	if !ok || s.Person == nil {
		return false
	}
	s.Person = &p
	return true
}

// Reauthenticated records that the session's person proved who they are
// again now (a fresh sign-in at the provider before a signature).
func (m *Sessions) Reauthenticated(id string) {
	now := m.clock.Now()
	m.mu.Lock()
	defer m.mu.Unlock()
	if s, ok := m.byID[idKey(id)]; ok {
		s.AuthTime = now
	}
}

// End removes a session (sign-out). Unknown IDs are ignored.
func (m *Sessions) End(id string) {
	m.mu.Lock()
	defer m.mu.Unlock()
	delete(m.byID, idKey(id))
}

// EndFor removes every session of the named person (on disable or a
// password reset) and returns how many there were.
func (m *Sessions) EndFor(name string) int {
	m.mu.Lock()
	defer m.mu.Unlock()
	n := 0
	for k, s := range m.byID {
		if s.Person != nil && s.Person.Name == name {
			delete(m.byID, k)
			n++
		}
	}
	return n
}
