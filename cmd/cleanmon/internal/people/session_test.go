package people

import (
	"errors"
	"testing"
	"time"
)

var ines = Person{Name: "ines", FullName: "Ines Varga", Role: RoleQA}

func TestIdleTimeout(t *testing.T) {
	clock := newClock()
	m := NewSessions(SessionConfig{}, clock)
	s, err := m.SignIn("", ines, "password")
	if err != nil {
		t.Fatal(err)
	}
	// Each use restarts the idle clock: three uses 14 minutes apart keep
	// the session alive for 42 minutes.
	for i := 0; i < 3; i++ {
		clock.Add(DefaultIdleTimeout - time.Minute)
		if _, err := m.Get(s.ID); err != nil {
			t.Fatalf("use %d after %s idle: %v", i, DefaultIdleTimeout-time.Minute, err)
		}
	}
	clock.Add(DefaultIdleTimeout)
	if _, err := m.Get(s.ID); !errors.Is(err, ErrExpired) {
		t.Fatalf("after %s idle = %v, want ErrExpired", DefaultIdleTimeout, err)
	}
	if _, err := m.Get(s.ID); !errors.Is(err, ErrNoSession) {
		t.Fatalf("timed-out session still held: %v", err)
	}
}

func TestIdleTimeoutConfigurable(t *testing.T) {
	clock := newClock()
	m := NewSessions(SessionConfig{IdleTimeout: 2 * time.Minute}, clock)
	s, _ := m.SignIn("", ines, "password")
	clock.Add(2 * time.Minute)
	if _, err := m.Get(s.ID); !errors.Is(err, ErrExpired) {
		t.Fatalf("after 2 min with a 2 min idle time-out = %v, want ErrExpired", err)
	}
}

func TestAbsoluteTimeoutDespiteActivity(t *testing.T) {
	clock := newClock()
	m := NewSessions(SessionConfig{AbsoluteTimeout: time.Hour}, clock)
	s, _ := m.SignIn("", ines, "password")
	for i := 0; i < 5; i++ {
		clock.Add(10 * time.Minute)
		if _, err := m.Get(s.ID); err != nil {
			t.Fatalf("at %d min: %v", (i+1)*10, err)
		}
	}
	clock.Add(10 * time.Minute)
	if _, err := m.Get(s.ID); !errors.Is(err, ErrExpired) {
		t.Fatalf("at 60 min of a 1 h session = %v, want ErrExpired", err)
	}
}

func TestSignInReplacesPreSession(t *testing.T) {
	m := NewSessions(SessionConfig{}, newClock())
	pre, err := m.Begin()
	if err != nil {
		t.Fatal(err)
	}
	if pre.SignedIn() {
		t.Fatal("a pre-sign-in session has a person")
	}
	s, err := m.SignIn(pre.ID, ines, "password")
	if err != nil {
		t.Fatal(err)
	}
	if s.ID == pre.ID || s.CSRF == pre.CSRF {
		t.Fatal("sign-in kept the session ID or CSRF token")
	}
	if _, err := m.Get(pre.ID); !errors.Is(err, ErrNoSession) {
		t.Fatalf("pre-sign-in ID after sign-in = %v, want ErrNoSession", err)
	}
	got, err := m.Get(s.ID)
	if err != nil || got.Person == nil || *got.Person != ines || got.Method != "password" {
		t.Fatalf("new session = %+v, %v", got, err)
	}
	if len(s.ID) != 43 { // 32 random bytes, base64url without padding
		t.Fatalf("session ID %q is %d characters, want 43", s.ID, len(s.ID))
	}
}

func TestPreSessionTimesOutSooner(t *testing.T) {
	clock := newClock()
	m := NewSessions(SessionConfig{IdleTimeout: time.Hour}, clock)
	pre, _ := m.Begin()
	clock.Add(PreSignInTimeout)
	if _, err := m.Get(pre.ID); !errors.Is(err, ErrExpired) {
		t.Fatalf("pre-sign-in session after %s = %v, want ErrExpired", PreSignInTimeout, err)
	}
}

func TestEndForAndCap(t *testing.T) {
	clock := newClock()
	m := NewSessions(SessionConfig{MaxSessions: 3}, clock)
	a, _ := m.SignIn("", ines, "password")
	b, _ := m.SignIn("", ines, "password")
	c, _ := m.SignIn("", Person{Name: "piotr", Role: RoleOperator}, "password")
	if _, err := m.Begin(); !errors.Is(err, ErrBusy) {
		t.Fatalf("fourth session with a cap of 3 = %v, want ErrBusy", err)
	}
	if n := m.EndFor("ines"); n != 2 {
		t.Fatalf("EndFor(ines) = %d, want 2", n)
	}
	for _, id := range []string{a.ID, b.ID} {
		if _, err := m.Get(id); !errors.Is(err, ErrNoSession) {
			t.Fatalf("ines's session after EndFor: %v", err)
		}
	}
	if _, err := m.Get(c.ID); err != nil {
		t.Fatalf("piotr's session ended too: %v", err)
	}
	// Timed-out sessions make room.
	clock.Add(DefaultIdleTimeout)
	for i := 0; i < 3; i++ {
		if _, err := m.Begin(); err != nil {
			t.Fatalf("Begin %d after the others timed out: %v", i, err)
		}
	}
}
