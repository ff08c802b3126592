// Package web is the operator's pages: static HTML shells, one JavaScript
// module each and a style sheet, all embedded and served with a strict
// content security policy, and the few JSON routes only the pages use
// (site layout, DP history, sign-in check, certification report). The
// pages read everything else from the API of the same origin.
package web

import (
	"context"
	"log/slog"
	"time"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/store"
)

// PressureStore is what the DP history reads.
type PressureStore interface {
	ScanPressure(sensor string, from, to time.Time, fn func(store.Pressure) error) error
}

// Certifier certifies a zone's stored readings as the API does (the api
// server is one): the status and exact body of its answer, and the report
// when it succeeded.
type Certifier interface {
	CertifyStored(ctx context.Context, zone, from, to string) (status int, body []byte, rep *classify.Report)
}

// Options are the collaborators of the pages; none may be nil.
type Options struct {
	Site    *site.Config
	Store   PressureStore
	Certify Certifier
	Records Records
	Access  *access.Authorizer
	// Errors is the daemon's table from errors to statuses (api.Errors).
	Errors httpx.Table
	Log    *slog.Logger
	Now    func() time.Time
	// The people who sign in: the admin's accounts page, signatures of
	// reports, and the audit chain's state for the audit page.
	Accounts   Accounts
	Signatures Signatures
	Audit      AuditState
}

// Server serves the pages; Register mounts them.
type Server struct {
	cfg     *site.Config
	store   PressureStore
	certify Certifier
	records Records
	auth    *access.Authorizer
	errs    httpx.Table
	log     *slog.Logger
	now     func() time.Time
	acc     Accounts
	sigs    Signatures
	audit   AuditState
}

// New returns the pages over o.
func New(o Options) *Server {
	return &Server{cfg: o.Site, store: o.Store, certify: o.Certify, records: o.Records, auth: o.Access, errs: o.Errors, log: o.Log, now: o.Now,
		acc: o.Accounts, sigs: o.Signatures, audit: o.Audit}
}
