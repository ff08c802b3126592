package people

import (
	"context"
	"errors"
	"strings"
	"testing"
)

func TestAddRules(t *testing.T) {
	f := newFixture(t)
	ctx := context.Background()
	cases := []struct {
		name string
		n    NewAccount
		want error
	}{
		{"upper case name", NewAccount{Name: "Ines2", FullName: "X Y", Role: RoleQA, Password: "long-enough-password-1"}, ErrInvalid},
		{"name starts with digit", NewAccount{Name: "1ines", FullName: "X Y", Role: RoleQA, Password: "long-enough-password-1"}, ErrInvalid},
		{"empty full name", NewAccount{Name: "anna", FullName: "  ", Role: RoleQA, Password: "long-enough-password-1"}, ErrInvalid},
		{"unknown role", NewAccount{Name: "anna", FullName: "Anna Berg", Role: "root", Password: "long-enough-password-1"}, ErrInvalid},
		{"weak password", NewAccount{Name: "anna", FullName: "Anna Berg", Role: RoleQA, Password: "anna-is-my-password"}, ErrInvalid},
		{"name taken", NewAccount{Name: "ines", FullName: "Ines Other", Role: RoleViewer, Password: "long-enough-password-1"}, ErrExists},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			if err := f.dir.Add(ctx, "admin", tc.n, ""); !errors.Is(err, tc.want) {
				t.Fatalf("Add = %v, want %v", err, tc.want)
			}
		})
	}
	if _, err := f.dir.Lookup("anna"); !errors.Is(err, ErrNotFound) {
		t.Fatalf("a refused Add stored the account: %v", err)
	}
}

func TestDisabledNameStaysTaken(t *testing.T) {
	f := newFixture(t)
	ctx := context.Background()
	if err := f.dir.Disable(ctx, "admin", "piotr", "left the site"); err != nil {
		t.Fatal(err)
	}
	if _, err := f.dir.Authenticate(ctx, "piotr", piotrPassword); !errors.Is(err, ErrDisabled) {
		t.Fatalf("disabled sign-in = %v, want ErrDisabled", err)
	}
	err := f.dir.Add(ctx, "admin", NewAccount{Name: "piotr", FullName: "Piotr Second", Role: RoleAdmin, Password: "another-long-password"}, "")
	if !errors.Is(err, ErrExists) {
		t.Fatalf("re-adding a disabled name = %v, want ErrExists", err)
	}
	a, _ := f.dir.Lookup("piotr")
	if a.FullName != "Piotr Lind" || a.Role != "operator" {
		t.Fatalf("account changed: %+v", a)
	}
}

func TestLockoutAfterFailuresAndAdminUnlock(t *testing.T) {
	f := newFixture(t)
	ctx := context.Background()
	for i := 1; i < DefaultMaxFailures; i++ {
		if _, err := f.dir.Authenticate(ctx, "ines", "wrong-password-number"); !errors.Is(err, ErrBadCredentials) {
			t.Fatalf("failure %d = %v, want ErrBadCredentials", i, err)
		}
	}
	// One success in between resets the count.
	if _, err := f.dir.Authenticate(ctx, "ines", inesPassword); err != nil {
		t.Fatalf("right password after %d failures: %v", DefaultMaxFailures-1, err)
	}
	for i := 1; i <= DefaultMaxFailures; i++ {
		_, err := f.dir.Authenticate(ctx, "ines", "wrong-password-number")
		want := ErrBadCredentials
		if i == DefaultMaxFailures {
			want = ErrLocked
		}
		if !errors.Is(err, want) {
			t.Fatalf("failure %d = %v, want %v", i, err, want)
		}
	}
	if _, err := f.dir.Authenticate(ctx, "ines", inesPassword); !errors.Is(err, ErrLocked) {
		t.Fatalf("right password while locked = %v, want ErrLocked", err)
	}
	f.clock.Add(24 * 60 * 60e9) // a lockout does not wear off by itself
	if _, err := f.dir.Authenticate(ctx, "ines", inesPassword); !errors.Is(err, ErrLocked) {
		t.Fatalf("a day later = %v, want ErrLocked", err)
	}
	if err := f.dir.Unlock(ctx, "admin", "ines", "spoke to her on the phone"); err != nil {
		t.Fatal(err)
	}
	p, err := f.dir.Authenticate(ctx, "ines", inesPassword)
	if err != nil || p.Name != "ines" || p.FullName != "Ines Varga" || p.Role != RoleQA {
		t.Fatalf("after unlock = %+v, %v", p, err)
	}
	var locks, unlocks int
	for _, e := range f.entries(t, "account-change") {
		switch {
		case strings.Contains(string(e.Detail), "locked: false → true"):
			locks++
			if e.Subject != "ines: sign-in-failed" {
				t.Errorf("lock entry subject %q", e.Subject)
			}
		case e.Subject == "ines: unlock":
			unlocks++
			if e.Actor != "admin" || e.Reason != "spoke to her on the phone" {
				t.Errorf("unlock entry %+v", e)
			}
		}
	}
	if locks != 1 || unlocks != 1 {
		t.Fatalf("audit has %d lock and %d unlock entries, want 1 and 1", locks, unlocks)
	}
}

func TestUnknownNameAudited(t *testing.T) {
	f := newFixture(t)
	if _, err := f.dir.Authenticate(context.Background(), "mallory", "whatever-it-is-here"); !errors.Is(err, ErrBadCredentials) {
		t.Fatalf("unknown name = %v", err)
	}
	es := f.entries(t, EventSignInFailed)
	if len(es) != 1 || es[0].Subject != "mallory" || es[0].Reason != "unknown account name" {
		t.Fatalf("entries = %+v", es)
	}
}

func TestResetClearsLockAndChecksRules(t *testing.T) {
	f := newFixture(t)
	ctx := context.Background()
	for i := 0; i < DefaultMaxFailures; i++ {
		_, _ = f.dir.Authenticate(ctx, "piotr", "not-the-password-at-all")
	}
	if err := f.dir.Reset(ctx, "admin", "piotr", "piotr-new-password-1", ""); !errors.Is(err, ErrInvalid) {
		t.Fatalf("reset to a password with the name = %v, want ErrInvalid", err)
	}
	if err := f.dir.Reset(ctx, "admin", "piotr", "gowning-room-cascade-8", "forgot"); err != nil {
		t.Fatal(err)
	}
	if _, err := f.dir.Authenticate(ctx, "piotr", piotrPassword); !errors.Is(err, ErrBadCredentials) {
		t.Fatalf("old password after reset = %v", err)
	}
	if _, err := f.dir.Authenticate(ctx, "piotr", "gowning-room-cascade-8"); err != nil {
		t.Fatalf("new password after reset: %v", err)
	}
}

func TestSignInExternalBinding(t *testing.T) {
	f := newFixture(t)
	ctx := context.Background()
	const idp = "https://idp.veldmark.example"
	lena := External{Issuer: idp, Subject: "u-17", Name: "lena", FullName: "Lena Sorensen", Role: RoleQA}
	if _, err := f.dir.SignInExternal(ctx, lena); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name string
		e    External
		want error
	}{
		{"another subject under the same name", External{Issuer: idp, Subject: "u-99", Name: "lena", FullName: "Lena Other", Role: RoleAdmin}, ErrExists},
		{"another provider", External{Issuer: "https://other.example", Subject: "u-17", Name: "lena", FullName: "Lena Sorensen", Role: RoleQA}, ErrExists},
		{"a local account's name", External{Issuer: idp, Subject: "u-5", Name: "ines", FullName: "Ines Varga", Role: RoleAdmin}, ErrExists},
		{"bad name", External{Issuer: idp, Subject: "u-6", Name: "Lena Sorensen", FullName: "Lena Sorensen", Role: RoleQA}, ErrOIDC},
		{"no full name", External{Issuer: idp, Subject: "u-7", Name: "kai", Role: RoleQA}, ErrOIDC},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := f.dir.SignInExternal(ctx, tc.e); !errors.Is(err, tc.want) {
				t.Fatalf("err = %v, want %v", err, tc.want)
			}
		})
	}
	// The same person again: role and full name follow the provider.
	lena.Role, lena.FullName = RoleOperator, "Lena Sorensen-Holm"
	p, err := f.dir.SignInExternal(ctx, lena)
	if err != nil || p.Role != RoleOperator {
		t.Fatalf("second sign-in = %+v, %v", p, err)
	}
	a, _ := f.dir.Lookup("lena")
	if a.Role != "operator" || a.FullName != "Lena Sorensen-Holm" || a.Subject != "u-17" {
		t.Fatalf("account after the second sign-in: %+v", a)
	}
	if _, err := f.dir.Authenticate(ctx, "lena", ""); !errors.Is(err, ErrBadCredentials) {
		t.Fatalf("password sign-in to a provider account = %v, want ErrBadCredentials", err)
	}
}
