package web

import (
	"context"
	"time"

	"cleanmon/cmd/cleanmon/internal/people"
)

// Accounts is the admin's side of the people who sign in.
type Accounts interface {
	Accounts() ([]AccountView, error)
	// ManageAccount applies op as the admin by; add and reset return the
	// generated password, which is shown once and kept nowhere.
	ManageAccount(ctx context.Context, by string, op AccountOp) (password string, err error)
}

// AccountView is one account as the accounts page shows it (never the
// password hash).
type AccountView struct {
	Name          string    `json:"name"`
	FullName      string    `json:"full_name"`
	Role          string    `json:"role"`
	Disabled      bool      `json:"disabled"`
	Locked        bool      `json:"locked"`
	FailedSignIns int       `json:"failed_sign_ins"`
	Provider      string    `json:"provider,omitempty"` // issuer of a provider account
	Created       time.Time `json:"created"`
	Changed       time.Time `json:"changed"`
}

// AccountOp is one change of an account: Op is add, disable, enable,
// unlock, reset or role.
type AccountOp struct {
	Op       string `json:"op"`
	Name     string `json:"name"`
	FullName string `json:"full_name"`
	Role     string `json:"role"`
	Reason   string `json:"reason"`
}

// Signatures makes and finds electronic signatures of records.
type Signatures interface {
	Sign(ctx context.Context, s people.Session, req people.SignRequest) (people.Signature, error)
	SignaturesFor(subject string) []people.Signature
}

// AuditState tells the audit page how the chain stands.
type AuditState interface {
	AuditStatus(ctx context.Context) AuditStatus
}

// AuditStatus is the chain's head and the result of its check.
type AuditStatus struct {
	Seq       uint64    `json:"seq"`
	Hash      string    `json:"hash"`
	Verified  bool      `json:"verified"`
	Check     string    `json:"check"` // what was checked
	CheckedAt time.Time `json:"checked_at"`
	Problems  []string  `json:"problems,omitempty"`
	Command   string    `json:"command,omitempty"` // the full check to run
}
