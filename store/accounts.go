package store

import (
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
)

// bucketAccounts holds the people who sign in: account name → account.
// Accounts are never deleted, so a name stays taken for good and every
// record that names a person keeps pointing at one person.
var bucketAccounts = []byte("accounts")

// Audit actions of account changes. The store writes the entry in the
// transaction of the change, so no change is stored without its entry.
const (
	AuditAccountAdd    = "account-add"    // an account was created
	AuditAccountChange = "account-change" // any later change; Reason says why, Detail what
)

var (
	// ErrAccountExists: CreateAccount was given a name that is, or was
	// once, taken. Names are never freed.
	ErrAccountExists = fmt.Errorf("%w: account name is already taken", ErrInvalid)
	// ErrNoAccount: no account has that name.
	ErrNoAccount = fmt.Errorf("%w: no such account", ErrNotFound)
)

// Account is one person who signs in. The store keeps it as given; the
// rules about names, roles and passwords belong to the caller. The
// password hash is stored but never written into the audit trail.
type Account struct {
	Name          string    // unique for good; the key
	FullName      string    // as shown on records and signatures
	Role          string    // viewer, operator, qa or admin (checked by the caller)
	Disabled      bool      // cannot sign in; the account is kept
	Locked        bool      // too many failed sign-ins; an admin unlocks
	FailedSignIns int       // failures since the last success or unlock
	PasswordHash  string    // encoded hash; empty for accounts of an identity provider
	Issuer        string    // identity provider's issuer URL; empty for local accounts
	Subject       string    // the provider's subject identifier, bound at first sign-in
	Created       time.Time // set by CreateAccount
	Changed       time.Time // set on every change
}

// AccountChange says who changed an account, when and why. Action is a
// short word for the audit entry's Subject line, e.g. "disable".
type AccountChange struct {
	By     string    // who made the change; empty: the daemon itself
	Action string    // what kind of change, e.g. "add", "disable", "reset", "sign-in-failed"
	Reason string    // why, as given
	Time   time.Time // zero: now
}

func checkAccount(a *Account) (field, reason string) {
	if why := checkName(a.Name); why != "" {
		return "Name", why
	}
	if why := checkName(a.Role); why != "" {
		return "Role", why
	}
	if len(a.FullName) > maxReasonLen {
		return "FullName", fmt.Sprintf("%d bytes, more than %d", len(a.FullName), maxReasonLen)
	}
	if len(a.PasswordHash) > maxReasonLen {
		return "PasswordHash", fmt.Sprintf("%d bytes, more than %d", len(a.PasswordHash), maxReasonLen)
	}
	if a.FailedSignIns < 0 {
		return "FailedSignIns", "negative"
	}
	return "", ""
}

func checkAccountChange(c *AccountChange) (field, reason string) {
	if len(c.By) > maxNameLen {
		return "By", fmt.Sprintf("%d bytes, more than %d", len(c.By), maxNameLen)
	}
	if why := checkName(c.Action); why != "" {
		return "Action", why
	}
	if len(c.Reason) > maxReasonLen {
		return "Reason", fmt.Sprintf("%d bytes, more than %d", len(c.Reason), maxReasonLen)
	}
	if why := checkTime(c.Time); why != "" {
		return "Time", why
	}
	return "", ""
}

// CreateAccount stores a new account and its AuditAccountAdd entry in
// one durable transaction. A name already in the store, disabled or not,
// gives ErrAccountExists and changes nothing.
func (s *Store) CreateAccount(ctx context.Context, a Account, c AccountChange) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	c = normChange(c)
	a.Created, a.Changed = c.Time, c.Time
	if field, reason := checkAccount(&a); field != "" {
		return &RecordError{Kind: "account", Field: field, Reason: reason}
	}
	if field, reason := checkAccountChange(&c); field != "" {
		return &RecordError{Kind: "account change", Field: field, Reason: reason}
	}
	return s.submit(ctx, 1, func(tx *bolt.Tx) error {
		b, err := accountsBucket(tx)
		if err != nil {
			return err
		}
		if b.Get([]byte(a.Name)) != nil {
			return fmt.Errorf("%w: %q", ErrAccountExists, a.Name)
		}
		return putAccount(tx, b, nil, &a, AuditAccountAdd, c)
	})
}

// UpdateAccount reads the named account, lets fn change it, and stores
// the result with its AuditAccountChange entry, all in one durable
// transaction, so concurrent changes (two failed sign-ins at once) are
// never lost. fn may run more than once if the group commit retries; it
// must only change the account it is given. An error from fn is returned
// and nothing is stored. The name cannot be changed. A change that
// changes nothing is not stored and writes no entry.
func (s *Store) UpdateAccount(ctx context.Context, name string, c AccountChange, fn func(*Account) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	c = normChange(c)
	if field, reason := checkAccountChange(&c); field != "" {
		return &RecordError{Kind: "account change", Field: field, Reason: reason}
	}
	return s.submit(ctx, 1, func(tx *bolt.Tx) error {
		b, err := accountsBucket(tx)
		if err != nil {
			return err
		}
		old, err := getAccount(b, name)
		if err != nil {
			return err
		}
		next := old
		if err := fn(&next); err != nil {
			return err
		}
		if next.Name != old.Name {
			return &RecordError{Kind: "account", Field: "Name", Reason: "an account's name cannot change"}
		}
		next.Created = old.Created
		next.Changed = old.Changed
		if next == old {
			return nil
		}
		next.Changed = c.Time
		if field, reason := checkAccount(&next); field != "" {
			return &RecordError{Kind: "account", Field: field, Reason: reason}
		}
		return putAccount(tx, b, &old, &next, AuditAccountChange, c)
	})
}

// GetAccount returns the named account, or ErrNoAccount.
func (s *Store) GetAccount(name string) (Account, error) {
	if err := s.enter(); err != nil {
		return Account{}, err
	}
	defer s.exit()
	var a Account
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		b := tx.Bucket(bucketAccounts)
		if b == nil {
			return fmt.Errorf("%w: %q", ErrNoAccount, name)
		}
		var err error
		a, err = getAccount(b, name)
		return err
	})
	return a, err
}

// Accounts returns every account, disabled ones included, by name.
func (s *Store) Accounts() ([]Account, error) {
	if err := s.enter(); err != nil {
		return nil, err
	}
	defer s.exit()
	var out []Account
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		b := tx.Bucket(bucketAccounts)
		if b == nil {
			return nil
		}
		return b.ForEach(func(k, v []byte) error {
			a, err := decodeAccount(k, v)
			if err != nil {
				return err
			}
			out = append(out, a)
			return nil
		})
	})
	return out, err
}

func normChange(c AccountChange) AccountChange {
	if c.Time.IsZero() {
		c.Time = time.Now()
	}
	c.Time = c.Time.UTC()
	return c
}

// accountsBucket creates the bucket in a file that predates it.
func accountsBucket(tx *bolt.Tx) (*bolt.Bucket, error) {
	return tx.CreateBucketIfNotExists(bucketAccounts)
}

func getAccount(b *bolt.Bucket, name string) (Account, error) {
	v := b.Get([]byte(name))
	if v == nil {
		return Account{}, fmt.Errorf("%w: %q", ErrNoAccount, name)
	}
	return decodeAccount([]byte(name), v)
}

func putAccount(tx *bolt.Tx, b *bolt.Bucket, old, next *Account, action string, c AccountChange) error {
	key := []byte(next.Name)
	v, err := encodeAccount(key, next)
	if err != nil {
		return err
	}
	if err := b.Put(key, v); err != nil {
		return fmt.Errorf("store: account %q: %w", next.Name, err)
	}
	_, _, err = appendAudit(tx, &AuditEntry{
		Time: c.Time, Actor: actorOrSystem(c.By), Action: action,
		Subject: next.Name + ": " + c.Action, Reason: c.Reason, Detail: accountDiff(old, next),
	})
	return err
}

// accountJSON is the stored form: JSON for readability in a dump and
// tolerance of added fields, sealed with the store's checksum.
type accountJSON struct {
	FullName      string    `json:"full_name"`
	Role          string    `json:"role"`
	Disabled      bool      `json:"disabled,omitempty"`
	Locked        bool      `json:"locked,omitempty"`
	FailedSignIns int       `json:"failed_sign_ins,omitempty"`
	PasswordHash  string    `json:"password_hash,omitempty"`
	Issuer        string    `json:"issuer,omitempty"`
	Subject       string    `json:"subject,omitempty"`
	Created       time.Time `json:"created"`
	Changed       time.Time `json:"changed"`
}

func encodeAccount(key []byte, a *Account) ([]byte, error) {
	body, err := json.Marshal(accountJSON{
		FullName: a.FullName, Role: a.Role, Disabled: a.Disabled, Locked: a.Locked,
		FailedSignIns: a.FailedSignIns, PasswordHash: a.PasswordHash, Issuer: a.Issuer,
		Subject: a.Subject, Created: a.Created, Changed: a.Changed,
	})
	if err != nil {
		return nil, fmt.Errorf("store: account %q: %w", a.Name, err)
	}
	return seal(key, append([]byte{codecV1}, body...)), nil
}

func decodeAccount(key, v []byte) (Account, error) {
	body, err := unseal(key, v)
	if err != nil {
		return Account{}, fmt.Errorf("%w: account %q: %v", ErrCorrupt, key, err)
	}
	var j accountJSON
	if err := json.Unmarshal(body, &j); err != nil {
		return Account{}, fmt.Errorf("%w: account %q: %v", ErrCorrupt, key, err)
	}
	return Account{
		Name: string(key), FullName: j.FullName, Role: j.Role, Disabled: j.Disabled, Locked: j.Locked,
		FailedSignIns: j.FailedSignIns, PasswordHash: j.PasswordHash, Issuer: j.Issuer,
		Subject: j.Subject, Created: j.Created.UTC(), Changed: j.Changed.UTC(),
	}, nil
}

// accountDiff is the readable Detail of an account's audit entry: each
// field that changed as "field: old → new", one a line, or every field
// of a new account. The password hash is named, never shown.
func accountDiff(old, next *Account) []byte {
	var prev Account
	if old != nil {
		prev = *old
	}
	fields := []struct {
		name      string
		was, is   string
		sensitive bool
	}{
		{"full name", prev.FullName, next.FullName, false},
		{"role", prev.Role, next.Role, false},
		{"disabled", fmt.Sprint(prev.Disabled), fmt.Sprint(next.Disabled), false},
		{"locked", fmt.Sprint(prev.Locked), fmt.Sprint(next.Locked), false},
		{"failed sign-ins", fmt.Sprint(prev.FailedSignIns), fmt.Sprint(next.FailedSignIns), false},
		{"password", prev.PasswordHash, next.PasswordHash, true},
		{"issuer", prev.Issuer, next.Issuer, false},
		{"subject", prev.Subject, next.Subject, false},
	}
	var lines []string
	for _, f := range fields {
		switch {
		case old != nil && f.was == f.is:
		case f.sensitive && f.is == "":
			lines = append(lines, f.name+": none")
		case f.sensitive && old == nil:
			lines = append(lines, f.name+": set")
		case f.sensitive:
			lines = append(lines, f.name+": changed")
		case old == nil:
			lines = append(lines, fmt.Sprintf("%s: %s", f.name, f.is))
		default:
			lines = append(lines, fmt.Sprintf("%s: %s → %s", f.name, f.was, f.is))
		}
	}
	return []byte(strings.Join(lines, "\n"))
}

// verifyAccounts checks every stored account's checksum and encoding
// and returns one problem a damaged account. It is ready for Verify to
// call once the verifier walks the accounts bucket.
func verifyAccounts(tx *bolt.Tx) []string {
	b := tx.Bucket(bucketAccounts)
	if b == nil {
		return nil
	}
	var problems []string
	_ = b.ForEach(func(k, v []byte) error {
		if _, err := decodeAccount(k, v); err != nil {
			problems = append(problems, err.Error())
		}
		return nil
	})
	return problems
}
