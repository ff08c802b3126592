// Package people is who a person on the pages is: accounts with
// argon2id password hashes and a lockout, sessions with idle and
// absolute time-outs, cookie and CSRF rules, electronic signatures that
// re-authenticate the signer, and sign-in through an OpenID Connect
// provider.
//
// It keeps nothing on disk itself: it defines the small interfaces it
// needs (AccountStore, AuditSink) and the daemon wires the store to them.
// Sessions live in memory: after a restart everybody signs in again,
// which fails safe.
package people

import (
	"context"
	"errors"
	"fmt"
	"time"
)

// Errors of the package, wrapped with detail; test with errors.Is.
var (
	// ErrBadCredentials: the name or the password is wrong. One error for
	// both, so a caller cannot tell which names exist.
	ErrBadCredentials = errors.New("people: name or password is wrong")
	// ErrLocked: too many failed sign-ins; an admin must unlock.
	ErrLocked = errors.New("people: account is locked after too many failed sign-ins; an admin must unlock it")
	// ErrDisabled: the account is disabled.
	ErrDisabled = errors.New("people: account is disabled")
	// ErrInvalid: a name, role, full name, password or meaning breaks a
	// rule; the message says which and why.
	ErrInvalid = errors.New("people: invalid input")
	// ErrExists: the account name is, or once was, taken.
	ErrExists = errors.New("people: account name is already taken")
	// ErrNotFound: no account has that name.
	ErrNotFound = errors.New("people: no such account")
	// ErrNoSession: no session has that ID (never issued, signed out, or
	// replaced at sign-in).
	ErrNoSession = errors.New("people: no such session")
	// ErrExpired: the session passed its idle or absolute time-out.
	ErrExpired = errors.New("people: session timed out")
	// ErrCSRF: a state-changing request lacks the session's token or
	// comes from another origin.
	ErrCSRF = errors.New("people: request refused: missing or wrong CSRF token, or cross-origin")
	// ErrSamePerson: a report's approver is the person who signed it as
	// performed.
	ErrSamePerson = errors.New("people: the person who performed the work cannot also approve it")
	// ErrReauth: a signature needs the signer to authenticate again.
	ErrReauth = errors.New("people: signing needs a fresh authentication")
	// ErrOIDC: sign-in through the identity provider failed.
	ErrOIDC = errors.New("people: sign-in through the identity provider failed")
	// ErrBusy: too many sessions or password checks at once.
	ErrBusy = errors.New("people: too many requests at once, try again")
)

// Role is what a person may do. The route × role table lives with the
// routes; this package only knows the names.
type Role string

// The roles, from least to most.
const (
	RoleViewer   Role = "viewer"   // reads pages and data
	RoleOperator Role = "operator" // acknowledges alarms, changes operating states
	RoleQA       Role = "qa"       // reviews and approves records and reports
	RoleAdmin    Role = "admin"    // manages accounts and the site
)

// ParseRole checks a role name.
func ParseRole(s string) (Role, error) {
	switch r := Role(s); r {
	case RoleViewer, RoleOperator, RoleQA, RoleAdmin:
		return r, nil
	}
	return "", fmt.Errorf("%w: role %q is not one of viewer, operator, qa, admin", ErrInvalid, s)
}

// Account is one person, as kept by an AccountStore. Its fields match
// store.Account one for one, so the daemon converts with a plain
// conversion. Accounts are never deleted, only disabled.
type Account struct {
	Name          string    // unique for good
	FullName      string    // shown on records and signatures
	Role          string    // a Role
	Disabled      bool      // cannot sign in
	Locked        bool      // too many failed sign-ins
	FailedSignIns int       // since the last success or unlock
	PasswordHash  string    // EncodeHash form; empty for provider accounts
	Issuer        string    // identity provider; empty for local accounts
	Subject       string    // provider's subject identifier
	Created       time.Time // set by the store
	Changed       time.Time // set by the store
}

// Change says who changed an account, when, and why; it becomes the
// audit entry of the change. Its fields match store.AccountChange.
type Change struct {
	By     string    // the person making the change; empty: the daemon
	Action string    // e.g. "add", "disable", "reset", "unlock", "sign-in-failed"
	Reason string    // why
	Time   time.Time // when
}

// AccountStore keeps accounts durably and records every change in the
// audit trail in the same transaction. The store package's Store
// satisfies it through a conversion of the types.
type AccountStore interface {
	// CreateAccount stores a new account; a taken name gives an error
	// matching ErrExists (the daemon's adapter maps the store's error).
	CreateAccount(ctx context.Context, a Account, c Change) error
	// UpdateAccount changes an account atomically through fn; an unknown
	// name gives an error matching ErrNotFound.
	UpdateAccount(ctx context.Context, name string, c Change, fn func(*Account) error) error
	// GetAccount returns the named account or an error matching ErrNotFound.
	GetAccount(name string) (Account, error)
}

// Event is an audit entry that belongs to no account change: a sign-in,
// a sign-out, a failed sign-in under an unknown name, a signature.
// Detail is readable text, one "key: value" a line.
type Event struct {
	Time    time.Time
	Actor   string // user name, or "" for the daemon
	Action  string // one of the Event* constants
	Subject string
	Reason  string
	Detail  string
}

// Audit actions of the events this package records.
const (
	EventSignIn       = "sign-in"
	EventSignInFailed = "sign-in-failed"
	EventSignOut      = "sign-out"
	EventSignature    = "signature"
)

// AuditSink appends an event to the audit chain durably and returns its
// sequence number, so a signature can name the entry that holds it.
type AuditSink interface {
	Record(ctx context.Context, e Event) (seq uint64, err error)
}

// Clock is the time source; tests pass a fake one.
type Clock interface{ Now() time.Time }

type systemClock struct{}

func (systemClock) Now() time.Time { return time.Now() }

// SystemClock is the wall clock.
var SystemClock Clock = systemClock{}

// Person is who a session belongs to.
type Person struct {
	Name     string
	FullName string
	Role     Role
	Issuer   string // "" for a local account
}
