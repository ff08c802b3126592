package people

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"strings"
	"testing"
	"time"
)

func signedIn(t *testing.T, f *fixture, name, password string) (Session, *Sessions) {
	t.Helper()
	p, err := f.dir.Authenticate(context.Background(), name, password)
	if err != nil {
		t.Fatal(err)
	}
	m := NewSessions(SessionConfig{}, f.clock)
	s, err := m.SignIn("", p, "password")
	if err != nil {
		t.Fatal(err)
	}
	return s, m
}

func TestSignatureRecordsMeaningAndHash(t *testing.T) {
	f := newFixture(t)
	s, _ := signedIn(t, f, "piotr", piotrPassword)
	g := NewSigner(f.dir, f.audit, f.clock, 0)
	content := []byte(`{"alarm":"42","zone":"assembly","kind":"excursion","level":"action"}`)
	f.clock.Add(3 * time.Minute)
	sig, err := g.Sign(context.Background(), s, SignRequest{
		Meaning: MeaningAcknowledged, Subject: "alarm 42", Content: content, Password: piotrPassword,
	})
	if err != nil {
		t.Fatal(err)
	}
	// SHA-256 of the empty string is the FIPS 180-4 example value
	// e3b0c442…b855; here the digest is computed by crypto/sha256 apart
	// from the signer.
	sum := sha256.Sum256(content)
	want := Signature{UserName: "piotr", FullName: "Piotr Lind", Meaning: MeaningAcknowledged,
		Time: t0.Add(3 * time.Minute), Subject: "alarm 42", SHA256: hex.EncodeToString(sum[:]), Method: "password", AuditSeq: sig.AuditSeq}
	if sig != want {
		t.Fatalf("signature = %+v\nwant        %+v", sig, want)
	}
	if !sig.Matches(content) || sig.Matches(append(content, ' ')) {
		t.Fatal("Matches does not tell the signed content from a changed one")
	}
	es := f.entries(t, EventSignature)
	if len(es) != 1 || es[0].Seq != sig.AuditSeq || es[0].Actor != "piotr" || es[0].Subject != "alarm 42" || es[0].Reason != "acknowledged" {
		t.Fatalf("audit entries = %+v (signature seq %d)", es, sig.AuditSeq)
	}
	d := string(es[0].Detail)
	for _, line := range []string{"full name: Piotr Lind", "meaning: acknowledged", "sha256: " + want.SHA256, "time: 2026-03-02T06:03:00Z"} {
		if !strings.Contains(d, line) {
			t.Errorf("detail %q lacks %q", d, line)
		}
	}
	if got := sig.String(); !strings.Contains(got, "acknowledged by Piotr Lind (piotr), 2026-03-02 06:03:00 UTC") {
		t.Errorf("String() = %q", got)
	}
	empty := Signature{SHA256: "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"}
	if !empty.Matches(nil) {
		t.Error("SHA-256 of empty input differs from FIPS 180-4's")
	}
}

func TestSignatureNeedsThePassword(t *testing.T) {
	f := newFixture(t)
	s, _ := signedIn(t, f, "piotr", piotrPassword)
	g := NewSigner(f.dir, f.audit, f.clock, 0)
	_, err := g.Sign(context.Background(), s, SignRequest{Meaning: MeaningAcknowledged, Subject: "alarm 7", Content: []byte("x"), Password: "not-my-password-at-all"})
	if !errors.Is(err, ErrBadCredentials) {
		t.Fatalf("wrong password = %v, want ErrBadCredentials", err)
	}
	if es := f.entries(t, EventSignature); len(es) != 0 {
		t.Fatalf("a refused signature was recorded: %+v", es)
	}
	a, _ := f.dir.Lookup("piotr")
	if a.FailedSignIns != 1 {
		t.Fatalf("a wrong signing password did not count toward the lockout: %d", a.FailedSignIns)
	}
	for _, tc := range []struct {
		name string
		req  SignRequest
		want error
	}{
		{"unknown meaning", SignRequest{Meaning: "seen", Subject: "alarm 7", Password: piotrPassword}, ErrInvalid},
		{"no subject", SignRequest{Meaning: MeaningReviewed, Subject: " ", Password: piotrPassword}, ErrInvalid},
	} {
		if _, err := g.Sign(context.Background(), s, tc.req); !errors.Is(err, tc.want) {
			t.Errorf("%s: %v, want %v", tc.name, err, tc.want)
		}
	}
	if _, err := g.Sign(context.Background(), Session{}, SignRequest{Meaning: MeaningReviewed, Subject: "x"}); !errors.Is(err, ErrReauth) {
		t.Errorf("unsigned-in session: %v, want ErrReauth", err)
	}
}

func TestApproverMustNotBePerformer(t *testing.T) {
	f := newFixture(t)
	ctx := context.Background()
	report := []byte("ISO 14644-1:2015 classification, zone assembly, ISO 7 in operation: pass")
	g := NewSigner(f.dir, f.audit, f.clock, 0)
	ines1, _ := signedIn(t, f, "ines", inesPassword)
	performed, err := g.Sign(ctx, ines1, SignRequest{Meaning: MeaningPerformed, Subject: "report assembly", Content: report, Password: inesPassword})
	if err != nil {
		t.Fatal(err)
	}
	prior := []Signature{performed}
	_, err = g.Sign(ctx, ines1, SignRequest{Meaning: MeaningApproved, Subject: "report assembly", Content: report, Password: inesPassword, Prior: prior})
	if !errors.Is(err, ErrSamePerson) {
		t.Fatalf("approval by the performer = %v, want ErrSamePerson", err)
	}
	// A review by the same person is allowed: only approval needs a second person.
	if _, err := g.Sign(ctx, ines1, SignRequest{Meaning: MeaningReviewed, Subject: "report assembly", Content: report, Password: inesPassword, Prior: prior}); err != nil {
		t.Fatalf("review by the performer: %v", err)
	}
	piotr, _ := signedIn(t, f, "piotr", piotrPassword)
	approved, err := g.Sign(ctx, piotr, SignRequest{Meaning: MeaningApproved, Subject: "report assembly", Content: report, Password: piotrPassword, Prior: prior})
	if err != nil {
		t.Fatalf("approval by a second person: %v", err)
	}
	if approved.SHA256 != performed.SHA256 || approved.UserName != "piotr" {
		t.Fatalf("approval = %+v", approved)
	}
	if n := len(f.entries(t, EventSignature)); n != 3 {
		t.Fatalf("%d signature entries, want 3", n)
	}
}

func TestProviderSessionSignsOnlyAfterFreshSignIn(t *testing.T) {
	f := newFixture(t)
	const issuer = "https://idp.veldmark.example"
	p, err := f.dir.SignInExternal(context.Background(), External{Issuer: issuer, Subject: "u-17", Name: "lena", FullName: "Lena Sorensen", Role: RoleQA})
	if err != nil {
		t.Fatal(err)
	}
	m := NewSessions(SessionConfig{}, f.clock)
	s, _ := m.SignIn("", p, "oidc")
	g := NewSigner(f.dir, f.audit, f.clock, 0)
	req := SignRequest{Meaning: MeaningReviewed, Subject: "alarm 9", Content: []byte("a")}
	if _, err := g.Sign(context.Background(), s, req); err != nil {
		t.Fatalf("right after the provider sign-in: %v", err)
	}
	f.clock.Add(DefaultReauthWindow + time.Second)
	s, _ = m.Get(s.ID)
	if _, err := g.Sign(context.Background(), s, req); !errors.Is(err, ErrReauth) {
		t.Fatalf("%s after the provider sign-in = %v, want ErrReauth", DefaultReauthWindow, err)
	}
	m.Reauthenticated(s.ID)
	s, _ = m.Get(s.ID)
	sig, err := g.Sign(context.Background(), s, req)
	if err != nil {
		t.Fatalf("after a fresh provider sign-in: %v", err)
	}
	if sig.FullName != "Lena Sorensen" || sig.Method != "oidc" {
		t.Fatalf("signature = %+v", sig)
	}
	if err := f.dir.Disable(context.Background(), "admin", "lena", "left"); err != nil {
		t.Fatal(err)
	}
	m.Reauthenticated(s.ID)
	s, _ = m.Get(s.ID)
	if _, err := g.Sign(context.Background(), s, req); !errors.Is(err, ErrDisabled) {
		t.Fatalf("disabled provider account signing = %v, want ErrDisabled", err)
	}
}
