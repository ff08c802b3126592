package people

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"testing"
	"time"

	"cleanmon/store"
)

// The tests keep accounts and audit entries in a real store, through the
// same few lines of adapter the daemon uses.

type storeAccounts struct{ s *store.Store }

func mapStoreErr(err error) error {
	switch {
	case errors.Is(err, store.ErrAccountExists):
		return fmt.Errorf("%w: %w", ErrExists, err)
	case errors.Is(err, store.ErrNoAccount):
		return fmt.Errorf("%w: %w", ErrNotFound, err)
	}
	return err
}

func (a storeAccounts) CreateAccount(ctx context.Context, acc Account, c Change) error {
	return mapStoreErr(a.s.CreateAccount(ctx, store.Account(acc), store.AccountChange(c)))
}

func (a storeAccounts) UpdateAccount(ctx context.Context, name string, c Change, fn func(*Account) error) error {
	return mapStoreErr(a.s.UpdateAccount(ctx, name, store.AccountChange(c), func(x *store.Account) error {
		return fn((*Account)(x))
	}))
}

func (a storeAccounts) GetAccount(name string) (Account, error) {
	x, err := a.s.GetAccount(name)
	return Account(x), mapStoreErr(err)
}

type storeAudit struct{ s *store.Store }

func (a storeAudit) Record(ctx context.Context, e Event) (uint64, error) {
	actor := e.Actor
	if actor == "" {
		actor = store.AuditActorSystem
	}
	seq, _, err := a.s.AppendAudit(ctx, store.AuditEntry{Time: e.Time, Actor: actor, Action: e.Action,
		Subject: e.Subject, Reason: e.Reason, Detail: []byte(e.Detail)})
	return seq, err
}

// fakeClock is the one clock the package's tests move by hand.
type fakeClock struct {
	mu sync.Mutex
	t  time.Time
}

var t0 = time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC) // a shift change at the demo site

func newClock() *fakeClock { return &fakeClock{t: t0} }

func (c *fakeClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *fakeClock) Add(d time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(d)
}

// testHash keeps the tests quick; DefaultHashParams are checked once.
var testHash = HashParams{Time: 1, Memory: 1024, Threads: 1, SaltLen: 16, KeyLen: 32}

const (
	inesPassword  = "violet-laminar-hood-42"
	piotrPassword = "seven-particles-per-litre"
)

type fixture struct {
	st    *store.Store
	clock *fakeClock
	dir   *Directory
	audit storeAudit
}

func newFixture(t *testing.T) *fixture {
	t.Helper()
	st, err := store.Open(t.TempDir(), store.Options{NoSync: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = st.Close() })
	clock := newClock()
	audit := storeAudit{st}
	dir, err := NewDirectory(storeAccounts{st}, audit, clock, Policy{Hash: testHash})
	if err != nil {
		t.Fatal(err)
	}
	f := &fixture{st: st, clock: clock, dir: dir, audit: audit}
	ctx := context.Background()
	for _, n := range []NewAccount{
		{Name: "ines", FullName: "Ines Varga", Role: RoleQA, Password: inesPassword},
		{Name: "piotr", FullName: "Piotr Lind", Role: RoleOperator, Password: piotrPassword},
	} {
		if err := dir.Add(ctx, "admin", n, "test fixture"); err != nil {
			t.Fatalf("Add(%s): %v", n.Name, err)
		}
	}
	return f
}

// entries returns the audit entries with action, oldest first.
func (f *fixture) entries(t *testing.T, action string) []store.AuditEntry {
	t.Helper()
	var out []store.AuditEntry
	if err := f.st.ScanAudit(1, 0, func(e store.AuditEntry) error {
		if e.Action == action {
			out = append(out, e)
		}
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	return out
}
