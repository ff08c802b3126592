package store

import (
	"bytes"
	"context"
	"errors"
	"strings"
	"sync"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

func TestAccountCreateGetAndAudit(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	a := Account{Name: "ines", FullName: "Ines Varga", Role: "qa", PasswordHash: "$argon2id$secret"}
	if err := s.CreateAccount(ctx, a, AccountChange{By: "admin", Action: "add", Reason: "new QA reviewer", Time: t0}); err != nil {
		t.Fatal(err)
	}
	got, err := s.GetAccount("ines")
	if err != nil {
		t.Fatal(err)
	}
	want := a
	want.Created, want.Changed = t0, t0
	if got != want {
		t.Fatalf("GetAccount = %+v, want %+v", got, want)
	}
	e := lastAudit(t, s)
	if e.Action != AuditAccountAdd || e.Actor != "admin" || e.Subject != "ines: add" || e.Reason != "new QA reviewer" || !e.Time.Equal(t0) {
		t.Fatalf("audit entry = %+v", e)
	}
	detail := string(e.Detail)
	for _, line := range []string{"full name: Ines Varga", "role: qa", "password: set"} {
		if !strings.Contains(detail, line) {
			t.Errorf("detail %q lacks %q", detail, line)
		}
	}
	if strings.Contains(detail, "argon2id") || strings.Contains(detail, "secret") {
		t.Errorf("detail %q shows the password hash", detail)
	}
}

func TestAccountNameTakenForGood(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	must(t, s.CreateAccount(ctx, Account{Name: "piet", Role: "operator"}, AccountChange{Action: "add", Time: t0}))
	must(t, s.UpdateAccount(ctx, "piet", AccountChange{By: "admin", Action: "disable", Time: t0.Add(time.Hour)}, func(a *Account) error {
		a.Disabled = true
		return nil
	}))
	seq0, _, _ := s.AuditHead()
	err := s.CreateAccount(ctx, Account{Name: "piet", Role: "admin"}, AccountChange{Action: "add", Time: t0.Add(2 * time.Hour)})
	if !errors.Is(err, ErrAccountExists) || !errors.Is(err, ErrInvalid) {
		t.Fatalf("second CreateAccount(piet) = %v, want ErrAccountExists", err)
	}
	got, _ := s.GetAccount("piet")
	if got.Role != "operator" || !got.Disabled {
		t.Fatalf("account changed by a refused create: %+v", got)
	}
	if seq, _, _ := s.AuditHead(); seq != seq0 {
		t.Fatalf("refused create wrote audit entry #%d", seq)
	}
}

func TestAccountUpdateDiffAndNoop(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	must(t, s.CreateAccount(ctx, Account{Name: "mara", FullName: "Mara Holm", Role: "operator"}, AccountChange{Action: "add", Time: t0}))
	t1 := t0.Add(time.Minute)
	must(t, s.UpdateAccount(ctx, "mara", AccountChange{By: "root", Action: "role", Reason: "shift lead", Time: t1}, func(a *Account) error {
		a.Role = "qa"
		a.PasswordHash = "new"
		return nil
	}))
	e := lastAudit(t, s)
	if e.Action != AuditAccountChange || e.Subject != "mara: role" || e.Actor != "root" {
		t.Fatalf("entry = %+v", e)
	}
	if d := string(e.Detail); d != "role: operator → qa\npassword: changed" {
		t.Fatalf("detail = %q", d)
	}
	got, _ := s.GetAccount("mara")
	if !got.Changed.Equal(t1) || !got.Created.Equal(t0) {
		t.Fatalf("times = created %v changed %v", got.Created, got.Changed)
	}
	seq0, _, _ := s.AuditHead()
	must(t, s.UpdateAccount(ctx, "mara", AccountChange{Action: "nothing", Time: t1.Add(time.Minute)}, func(a *Account) error { return nil }))
	if seq, _, _ := s.AuditHead(); seq != seq0 {
		t.Fatalf("an update that changed nothing wrote entry #%d", seq)
	}
}

func TestAccountUpdateRefusals(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	must(t, s.CreateAccount(ctx, Account{Name: "olaf", Role: "viewer"}, AccountChange{Action: "add", Time: t0}))
	errStop := errors.New("refused by caller")
	cases := []struct {
		name string
		acct string
		fn   func(*Account) error
		want error
	}{
		{"unknown account", "nobody", func(*Account) error { return nil }, ErrNoAccount},
		{"caller error", "olaf", func(a *Account) error { a.Role = "admin"; return errStop }, errStop},
		{"rename", "olaf", func(a *Account) error { a.Name = "olaf2"; return nil }, ErrInvalid},
		{"negative failures", "olaf", func(a *Account) error { a.FailedSignIns = -1; return nil }, ErrInvalid},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			err := s.UpdateAccount(ctx, tc.acct, AccountChange{Action: "x", Time: t0}, tc.fn)
			if !errors.Is(err, tc.want) {
				t.Fatalf("err = %v, want %v", err, tc.want)
			}
			got, _ := s.GetAccount("olaf")
			if got.Role != "viewer" || got.Name != "olaf" || got.FailedSignIns != 0 {
				t.Fatalf("refused update changed the account: %+v", got)
			}
		})
	}
	if err := s.UpdateAccount(ctx, "olaf", AccountChange{Time: t0}, func(*Account) error { return nil }); !errors.Is(err, ErrInvalid) {
		t.Fatalf("change without an action = %v, want ErrInvalid", err)
	}
}

// Failed sign-ins arriving together must each count: a lost increment
// would let an attacker guess more often than the lockout allows.
func TestAccountConcurrentUpdatesAllCount(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	must(t, s.CreateAccount(ctx, Account{Name: "eve", Role: "viewer"}, AccountChange{Action: "add", Time: t0}))
	const n = 20
	var wg sync.WaitGroup
	for i := 0; i < n; i++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if err := s.UpdateAccount(ctx, "eve", AccountChange{Action: "sign-in-failed", Time: t0}, func(a *Account) error {
				a.FailedSignIns++
				return nil
			}); err != nil {
				t.Error(err)
			}
		}()
	}
	wg.Wait()
	got, _ := s.GetAccount("eve")
	if got.FailedSignIns != n {
		t.Fatalf("FailedSignIns = %d, want %d", got.FailedSignIns, n)
	}
}

func TestAccountsSurviveReopenAndVerify(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{})
	ctx := context.Background()
	for _, name := range []string{"b-user", "a-user"} {
		must(t, s.CreateAccount(ctx, Account{Name: name, Role: "viewer"}, AccountChange{Action: "add", Time: t0}))
	}
	must(t, s.Close())
	s = openTest(t, dir, Options{})
	all, err := s.Accounts()
	if err != nil {
		t.Fatal(err)
	}
	if len(all) != 2 || all[0].Name != "a-user" || all[1].Name != "b-user" {
		t.Fatalf("Accounts = %+v", all)
	}
	must(t, s.Close())
	problems, err := Verify(dir + "/" + FileName)
	if err != nil {
		t.Fatal(err)
	}
	if len(problems) != 0 {
		t.Fatalf("Verify after account changes: %q", problems)
	}
}

func lastAudit(t *testing.T, s *Store) AuditEntry {
	t.Helper()
	seq, _, err := s.AuditHead()
	if err != nil {
		t.Fatal(err)
	}
	var e AuditEntry
	if err := s.ScanAudit(seq, seq, func(x AuditEntry) error { e = x; return nil }); err != nil {
		t.Fatal(err)
	}
	return e
}

func must(t *testing.T, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
}

func TestVerifyAccountsFindsAChangedAccount(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	must(t, s.CreateAccount(ctx, Account{Name: "ines", Role: "qa"}, AccountChange{Action: "add", Time: t0}))
	must(t, s.CreateAccount(ctx, Account{Name: "piet", Role: "viewer"}, AccountChange{Action: "add", Time: t0}))
	var problems []string
	check := func() {
		must(t, s.db.View(func(tx *bolt.Tx) error { problems = verifyAccounts(tx); return nil }))
	}
	check()
	if len(problems) != 0 {
		t.Fatalf("clean accounts: %q", problems)
	}
	// Raise piet to admin behind the store's back.
	must(t, s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketAccounts)
		v := append([]byte(nil), b.Get([]byte("piet"))...)
		i := bytes.Index(v, []byte(`"viewer"`))
		if i < 0 {
			t.Fatalf("stored form %q lacks the role", v)
		}
		v = append(v[:i:i], append([]byte(`"admin"`), v[i+len(`"viewer"`):]...)...)
		return b.Put([]byte("piet"), v)
	}))
	check()
	if len(problems) != 1 || !strings.Contains(problems[0], `"piet"`) || !strings.Contains(problems[0], "checksum") {
		t.Fatalf("problems = %q, want one naming piet's checksum", problems)
	}
	if _, err := s.GetAccount("piet"); !errors.Is(err, ErrCorrupt) {
		t.Fatalf("GetAccount of a changed account = %v, want ErrCorrupt", err)
	}
}
