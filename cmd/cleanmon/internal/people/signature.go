package people

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"strings"
	"time"
)

// Meaning is what a signature states (21 CFR 11.50 asks that the
// meaning be shown with the signature, from memory).
type Meaning string

// The meanings a signature may state.
const (
	MeaningPerformed    Meaning = "performed"    // I did the work this record reports (a certification run)
	MeaningAcknowledged Meaning = "acknowledged" // I have seen this alarm and act on it
	MeaningReviewed     Meaning = "reviewed"     // I checked this record
	MeaningApproved     Meaning = "approved"     // I release this record; never by its performer
)

// ParseMeaning checks a meaning.
func ParseMeaning(s string) (Meaning, error) {
	switch m := Meaning(s); m {
	case MeaningPerformed, MeaningAcknowledged, MeaningReviewed, MeaningApproved:
		return m, nil
	}
	return "", fmt.Errorf("%w: meaning %q is not one of performed, acknowledged, reviewed, approved", ErrInvalid, s)
}

// DefaultReauthWindow is how recent a provider sign-in must be for an
// OIDC session to sign without signing in at the provider again: long
// enough for the round trip and the click, short enough that a signature
// means the person was there.
const DefaultReauthWindow = 5 * time.Minute

// Signature is one electronic signature: who, when, what it means, and
// the SHA-256 of exactly the bytes signed.
type Signature struct {
	UserName string    `json:"user"`
	FullName string    `json:"full_name"`
	Meaning  Meaning   `json:"meaning"`
	Time     time.Time `json:"time"`
	Subject  string    `json:"subject"` // what record: "alarm 42", "report assembly 2026-03"
	SHA256   string    `json:"sha256"`  // hex of the signed content
	Method   string    `json:"method"`  // "password" or "oidc"
	AuditSeq uint64    `json:"audit_seq"`
}

// Signer makes signatures.
type Signer struct {
	dir    *Directory
	audit  AuditSink
	clock  Clock
	window time.Duration
}

// NewSigner returns a Signer re-checking passwords through dir and
// recording each signature in audit. window 0 means DefaultReauthWindow.
func NewSigner(dir *Directory, audit AuditSink, clock Clock, window time.Duration) *Signer {
	if clock == nil {
		clock = SystemClock
	}
	if window <= 0 {
		window = DefaultReauthWindow
	}
	return &Signer{dir: dir, audit: audit, clock: clock, window: window}
}

// SignRequest is what a person signs.
type SignRequest struct {
	Meaning  Meaning
	Subject  string      // names the record for people
	Content  []byte      // the exact bytes signed (a report, an alarm's canonical JSON)
	Password string      // the person's password, again; ignored for OIDC sessions
	Prior    []Signature // signatures already on the record, for the second-person rule
}

// Sign signs for the person of session s. A local person types the
// password again (a wrong one counts toward the lockout); an OIDC person
// must have signed in at the provider within the re-authentication
// window, else ErrReauth (send them through the provider with
// ForceLogin). An approval by whoever signed the record as performed is
// refused with ErrSamePerson. The signature is recorded in the audit
// chain before it is returned; if that fails there is no signature.
func (g *Signer) Sign(ctx context.Context, s Session, req SignRequest) (Signature, error) {
	if s.Person == nil {
		return Signature{}, fmt.Errorf("%w: not signed in", ErrReauth)
	}
	if _, err := ParseMeaning(string(req.Meaning)); err != nil {
		return Signature{}, err
	}
	if strings.TrimSpace(req.Subject) == "" {
		return Signature{}, fmt.Errorf("%w: signature subject is empty", ErrInvalid)
	}
	if req.Meaning == MeaningApproved {
		if err := CanApprove(req.Prior, s.Person.Name); err != nil {
			return Signature{}, err
		}
	}
	p, err := g.reauthenticate(ctx, s, req.Password)
	if err != nil {
		return Signature{}, err
	}
	sum := sha256.Sum256(req.Content)
	sig := Signature{
		UserName: p.Name, FullName: p.FullName, Meaning: req.Meaning, Time: g.clock.Now().UTC(),
		Subject: req.Subject, SHA256: hex.EncodeToString(sum[:]), Method: s.Method,
	}
	seq, err := g.audit.Record(ctx, Event{
		Time: sig.Time, Actor: sig.UserName, Action: EventSignature, Subject: sig.Subject,
		Reason: string(sig.Meaning), Detail: sig.Detail(),
	})
	if err != nil {
		return Signature{}, fmt.Errorf("people: signature not recorded, so not made: %w", err)
	}
	sig.AuditSeq = seq
	return sig, nil
}

func (g *Signer) reauthenticate(ctx context.Context, s Session, password string) (Person, error) {
	if s.Person.Issuer != "" {
		if age := g.clock.Now().Sub(s.AuthTime); age > g.window {
			return Person{}, fmt.Errorf("%w: last provider sign-in %s ago, more than %s", ErrReauth, age.Round(time.Second), g.window)
		}
		a, err := g.dir.Lookup(s.Person.Name)
		switch {
		case err != nil:
			return Person{}, err
		case a.Disabled:
			return Person{}, fmt.Errorf("%w: %s", ErrDisabled, a.Name)
		case a.Issuer != s.Person.Issuer:
			return Person{}, fmt.Errorf("%w: account %s no longer belongs to %s", ErrReauth, a.Name, s.Person.Issuer)
		}
		return Person{Name: a.Name, FullName: a.FullName, Role: Role(a.Role), Issuer: a.Issuer}, nil
	}
	p, err := g.dir.Authenticate(ctx, s.Person.Name, password)
	if err != nil {
		return Person{}, err
	}
	// The role or full name may have changed since sign-in; the record
	// carries the name as it is now.
	return p, nil
}

// Detail is the signature as readable audit text, one "key: value" a line.
func (sig Signature) Detail() string {
	return fmt.Sprintf("user: %s\nfull name: %s\nmeaning: %s\ntime: %s\nsha256: %s\nmethod: %s",
		sig.UserName, sig.FullName, sig.Meaning, sig.Time.Format(time.RFC3339Nano), sig.SHA256, sig.Method)
}

// String is the line printed under a signed record.
func (sig Signature) String() string {
	return fmt.Sprintf("%s by %s (%s), %s, SHA-256 %s", sig.Meaning, sig.FullName, sig.UserName,
		sig.Time.UTC().Format("2006-01-02 15:04:05 MST"), sig.SHA256)
}

// CanApprove refuses an approval by user of a record that user signed as
// performed: a second person must release the work.
func CanApprove(prior []Signature, user string) error {
	for _, p := range prior {
		if p.Meaning == MeaningPerformed && p.UserName == user {
			return fmt.Errorf("%w: %s signed %q as performed on %s", ErrSamePerson, user, p.Subject, p.Time.UTC().Format(time.RFC3339))
		}
	}
	return nil
}

// Matches reports whether content is what sig signed.
func (sig Signature) Matches(content []byte) bool {
	sum := sha256.Sum256(content)
	return sig.SHA256 == hex.EncodeToString(sum[:])
}
