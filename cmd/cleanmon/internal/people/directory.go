package people

import (
	"context"
	"errors"
	"fmt"
	"regexp"
	"strings"
	"unicode/utf8"
)

// DefaultMaxFailures is how many wrong passwords in a row lock an
// account: few enough to stop guessing, enough for a gloved typist
// (common practice, no source).
const DefaultMaxFailures = 5

// Policy tunes a Directory. The zero value takes every default.
type Policy struct {
	MinPasswordLen int        // default DefaultMinPasswordLen, never below MinPasswordLenFloor
	MaxFailures    int        // default DefaultMaxFailures
	Hash           HashParams // default DefaultHashParams
}

func (p Policy) withDefaults() Policy {
	if p.MinPasswordLen == 0 {
		p.MinPasswordLen = DefaultMinPasswordLen
	}
	if p.MinPasswordLen < MinPasswordLenFloor {
		p.MinPasswordLen = MinPasswordLenFloor
	}
	if p.MaxFailures <= 0 {
		p.MaxFailures = DefaultMaxFailures
	}
	if p.Hash == (HashParams{}) {
		p.Hash = DefaultHashParams
	}
	return p
}

// Directory manages accounts and checks passwords.
type Directory struct {
	store  AccountStore
	audit  AuditSink
	clock  Clock
	policy Policy
	hashes chan struct{} // semaphore of MaxConcurrentHashes
	dummy  string        // hash checked for unknown names, so timing tells nothing
}

// NewDirectory returns a Directory over st, writing events that are not
// account changes to audit. clock nil means SystemClock.
func NewDirectory(st AccountStore, audit AuditSink, clock Clock, policy Policy) (*Directory, error) {
	if clock == nil {
		clock = SystemClock
	}
	d := &Directory{store: st, audit: audit, clock: clock, policy: policy.withDefaults(),
		hashes: make(chan struct{}, MaxConcurrentHashes)}
	dummy, err := hashPassword("not a password of anybody", d.policy.Hash)
	if err != nil {
		return nil, err
	}
	d.dummy = dummy
	return d, nil
}

// nameRE: lower case so that two names never differ only in case; a
// leading letter so that a name is never mistaken for a number or flag.
var nameRE = regexp.MustCompile(`^[a-z][a-z0-9._-]{0,63}$`)

// CheckName checks an account name: 1 to 64 of a-z, 0-9, '.', '_', '-',
// starting with a letter.
func CheckName(name string) error {
	if !nameRE.MatchString(name) {
		return fmt.Errorf("%w: account name %q: use 1 to 64 of a-z, 0-9, '.', '_', '-', starting with a letter", ErrInvalid, name)
	}
	return nil
}

func checkFullName(full string) error {
	switch n := utf8.RuneCountInString(strings.TrimSpace(full)); {
	case !utf8.ValidString(full):
		return fmt.Errorf("%w: full name is not valid UTF-8", ErrInvalid)
	case n == 0:
		return fmt.Errorf("%w: full name is empty: signatures must show who signed", ErrInvalid)
	case n > 200:
		return fmt.Errorf("%w: full name has %d characters, at most 200", ErrInvalid, n)
	}
	return nil
}

// NewAccount is what Add needs.
type NewAccount struct {
	Name, FullName, Password string
	Role                     Role
}

// Add creates a local account. by is the admin adding it ("" for the
// daemon, e.g. the demo's first admin).
func (d *Directory) Add(ctx context.Context, by string, n NewAccount, reason string) error {
	if err := CheckName(n.Name); err != nil {
		return err
	}
	if err := checkFullName(n.FullName); err != nil {
		return err
	}
	if _, err := ParseRole(string(n.Role)); err != nil {
		return err
	}
	if err := CheckPassword(n.Password, n.Name, n.FullName, d.policy.MinPasswordLen); err != nil {
		return err
	}
	hash, err := d.hash(ctx, n.Password)
	if err != nil {
		return err
	}
	a := Account{Name: n.Name, FullName: strings.TrimSpace(n.FullName), Role: string(n.Role), PasswordHash: hash}
	return d.store.CreateAccount(ctx, a, d.change(by, "add", reason))
}

// Disable stops an account from signing in; it is kept for good. The
// caller also ends its sessions (Sessions.EndFor).
func (d *Directory) Disable(ctx context.Context, by, name, reason string) error {
	return d.update(ctx, by, name, "disable", reason, func(a *Account) error { a.Disabled = true; return nil })
}

// Enable lets a disabled account sign in again.
func (d *Directory) Enable(ctx context.Context, by, name, reason string) error {
	return d.update(ctx, by, name, "enable", reason, func(a *Account) error { a.Disabled = false; return nil })
}

// Unlock clears a lockout and the failure count.
func (d *Directory) Unlock(ctx context.Context, by, name, reason string) error {
	return d.update(ctx, by, name, "unlock", reason, func(a *Account) error {
		a.Locked, a.FailedSignIns = false, 0
		return nil
	})
}

// SetRole changes a local account's role.
func (d *Directory) SetRole(ctx context.Context, by, name string, role Role, reason string) error {
	if _, err := ParseRole(string(role)); err != nil {
		return err
	}
	return d.update(ctx, by, name, "role", reason, func(a *Account) error { a.Role = string(role); return nil })
}

// Reset sets a new password (under the same rules as Add) and clears a
// lockout: the admin who resets has spoken to the person.
func (d *Directory) Reset(ctx context.Context, by, name, password, reason string) error {
	a, err := d.store.GetAccount(name)
	if err != nil {
		return err
	}
	if a.Issuer != "" {
		return fmt.Errorf("%w: %q signs in through %s; its password is kept there", ErrInvalid, name, a.Issuer)
	}
	if err := CheckPassword(password, a.Name, a.FullName, d.policy.MinPasswordLen); err != nil {
		return err
	}
	hash, err := d.hash(ctx, password)
	if err != nil {
		return err
	}
	return d.update(ctx, by, name, "reset", reason, func(a *Account) error {
		a.PasswordHash, a.Locked, a.FailedSignIns = hash, false, 0
		return nil
	})
}

// Lookup returns an account.
func (d *Directory) Lookup(name string) (Account, error) { return d.store.GetAccount(name) }

// Authenticate checks a local password. A wrong password counts toward
// the lockout, and the sign-in that reaches Policy.MaxFailures locks the
// account; both are written as account changes. Unknown names, wrong
// passwords and provider accounts all give ErrBadCredentials; a locked
// or disabled account gives ErrLocked or ErrDisabled, whatever the
// password, so a locked account cannot be probed.
func (d *Directory) Authenticate(ctx context.Context, name, password string) (Person, error) {
	a, err := d.store.GetAccount(name)
	if errors.Is(err, ErrNotFound) {
		_, _ = d.check(ctx, password, d.dummy)
		d.event(ctx, Event{Action: EventSignInFailed, Subject: name, Reason: "unknown account name"})
		return Person{}, ErrBadCredentials
	}
	if err != nil {
		return Person{}, err
	}
	switch {
	case a.Disabled:
		return Person{}, fmt.Errorf("%w: %s", ErrDisabled, name)
	case a.Locked:
		return Person{}, fmt.Errorf("%w: %s", ErrLocked, name)
	case a.PasswordHash == "":
		d.event(ctx, Event{Action: EventSignInFailed, Subject: name, Reason: "account signs in through its identity provider"})
		return Person{}, ErrBadCredentials
	}
	ok, err := d.check(ctx, password, a.PasswordHash)
	if err != nil {
		return Person{}, err
	}
	if !ok {
		return Person{}, d.failed(ctx, name)
	}
	if a.FailedSignIns > 0 {
		err := d.update(ctx, "", name, "failures-cleared", "correct password", func(a *Account) error {
			a.FailedSignIns = 0
			return nil
		})
		if err != nil {
			return Person{}, err
		}
	}
	return Person{Name: a.Name, FullName: a.FullName, Role: Role(a.Role)}, nil
}

// failed counts a wrong password and locks at the limit.
func (d *Directory) failed(ctx context.Context, name string) error {
	locked := false
	err := d.update(ctx, "", name, "sign-in-failed", "wrong password", func(a *Account) error {
		a.FailedSignIns++
		if a.FailedSignIns >= d.policy.MaxFailures {
			a.Locked = true
		}
		locked = a.Locked
		return nil
	})
	if err != nil {
		return err
	}
	if locked {
		return fmt.Errorf("%w: %s", ErrLocked, name)
	}
	return ErrBadCredentials
}

func (d *Directory) update(ctx context.Context, by, name, action, reason string, fn func(*Account) error) error {
	return d.store.UpdateAccount(ctx, name, d.change(by, action, reason), fn)
}

func (d *Directory) change(by, action, reason string) Change {
	return Change{By: by, Action: action, Reason: reason, Time: d.clock.Now()}
}

// event records an audit event; a failure to record is not hidden from
// the caller of a state change, but a sign-in failure is already an
// error, so it is dropped there.
func (d *Directory) event(ctx context.Context, e Event) {
	if d.audit == nil {
		return
	}
	e.Time = d.clock.Now()
	_, _ = d.audit.Record(ctx, e)
}

func (d *Directory) hash(ctx context.Context, password string) (string, error) {
	if err := d.acquire(ctx); err != nil {
		return "", err
	}
	defer func() { <-d.hashes }()
	return hashPassword(password, d.policy.Hash)
}

func (d *Directory) check(ctx context.Context, password, encoded string) (bool, error) {
	if err := d.acquire(ctx); err != nil {
		return false, err
	}
	defer func() { <-d.hashes }()
	return checkPasswordHash(password, encoded)
}

func (d *Directory) acquire(ctx context.Context) error {
	select {
	case d.hashes <- struct{}{}:
		return nil
	case <-ctx.Done():
		return fmt.Errorf("%w: %w", ErrBusy, ctx.Err())
	}
}

// External is a person as an identity provider vouches for them.
type External struct {
	Issuer, Subject string // who vouches, and the provider's stable ID of the person
	Name, FullName  string
	Role            Role
}

// SignInExternal binds a provider's person to an account: the first
// sign-in creates it (issuer and subject recorded), later ones update
// full name and role from the token. A name held by a local account, by
// another provider or by another subject is refused with ErrExists, so
// nobody at the provider can take over a local break-glass account or a
// former colleague's name; a disabled account is refused even if the
// provider lets the person in.
func (d *Directory) SignInExternal(ctx context.Context, e External) (Person, error) {
	if err := CheckName(e.Name); err != nil {
		return Person{}, fmt.Errorf("%w: name claim: %w", ErrOIDC, err)
	}
	if err := checkFullName(e.FullName); err != nil {
		return Person{}, fmt.Errorf("%w: full name claim: %w", ErrOIDC, err)
	}
	if e.Issuer == "" || e.Subject == "" {
		return Person{}, fmt.Errorf("%w: token lacks issuer or subject", ErrOIDC)
	}
	p := Person{Name: e.Name, FullName: strings.TrimSpace(e.FullName), Role: e.Role, Issuer: e.Issuer}
	a, err := d.store.GetAccount(e.Name)
	if errors.Is(err, ErrNotFound) {
		err = d.store.CreateAccount(ctx, Account{Name: p.Name, FullName: p.FullName, Role: string(p.Role),
			Issuer: e.Issuer, Subject: e.Subject}, d.change("", "add-from-provider", "first sign-in through "+e.Issuer))
		if err != nil {
			return Person{}, err
		}
		return p, nil
	}
	if err != nil {
		return Person{}, err
	}
	if a.Issuer != e.Issuer || a.Subject != e.Subject {
		d.event(ctx, Event{Action: EventSignInFailed, Subject: e.Name, Reason: "name belongs to another account",
			Detail: "issuer: " + e.Issuer + "\nsubject: " + e.Subject})
		return Person{}, fmt.Errorf("%w: %q belongs to another account than the provider's person %s", ErrExists, e.Name, e.Subject)
	}
	if a.Disabled {
		return Person{}, fmt.Errorf("%w: %s", ErrDisabled, e.Name)
	}
	err = d.update(ctx, "", e.Name, "provider-update", "claims at sign-in", func(a *Account) error {
		a.FullName, a.Role = p.FullName, string(p.Role)
		return nil
	})
	return p, err
}
