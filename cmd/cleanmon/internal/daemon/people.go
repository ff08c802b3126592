package daemon

import (
	"context"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"os"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/cmd/cleanmon/internal/web"
	"cleanmon/store"
)

// oidcDiscoveryTimeout bounds the provider's discovery at start.
const oidcDiscoveryTimeout = 15 * time.Second

// peopleSide is the people who sign in on the pages: their accounts,
// sessions, signatures and the identity provider, wired to the store. It
// serves the API and the pages through their own interfaces.
type peopleSide struct {
	st       *store.Store
	dir      *people.Directory
	sessions *people.Sessions
	web      *people.Web
	signer   *people.Signer
	oidc     *people.OIDC // nil without an identity provider

	// The audit page's check reads every page of the file (about a
	// second a gigabyte): its answer is kept for auditCheckFor, so that
	// viewers refreshing the page do not each read the store again.
	checkMu sync.Mutex
	checked web.AuditStatus // Seq and Hash unused: read at every view
	// fault is the daemon's integrity fault, "" while there is none
	// (its start-up and daily checks): shown on the page whatever the
	// kept check says.
	fault func() string

	mu   sync.Mutex
	sigs map[string][]people.Signature // by subject, oldest first
	// sigErr is why the signatures could not all be read at start (a
	// damaged store): logged by the daemon, which then serves reads only.
	sigErr error
}

// policyOf is the account policy of the site's accounts section.
func policyOf(c *site.Config) people.Policy {
	return people.Policy{MinPasswordLen: c.Accounts.MinPasswordLength, MaxFailures: c.Accounts.Lockout}
}

// newPeople builds the accounts, sessions and signatures over st, and
// the identity provider when the site has one (discovered now).
func newPeople(ctx context.Context, st *store.Store, cfg *site.Config, secure bool) (*peopleSide, error) {
	audit := peopleAudit{st}
	dir, err := people.NewDirectory(accountStore{st}, audit, nil, policyOf(cfg))
	if err != nil {
		return nil, asUsage(err)
	}
	sessions := people.NewSessions(people.SessionConfig{IdleTimeout: cfg.Accounts.Idle(), AbsoluteTimeout: cfg.Accounts.Absolute()}, nil)
	w, err := people.NewWeb(dir, sessions, audit, people.WebConfig{SecureCookies: secure || cfg.Accounts.SecureCookies,
		TrustedOrigins: cfg.Accounts.TrustedOrigins, Fail: failPeople})
	if err != nil {
		return nil, asUsage(err)
	}
	p := &peopleSide{st: st, dir: dir, sessions: sessions, web: w, signer: people.NewSigner(dir, audit, nil, 0), sigs: map[string][]people.Signature{}}
	// A damaged chain must not stop the daemon from serving reads and
	// raising its integrity alarm: the signatures read so far are shown,
	// and the fault is the start-up check's to report.
	if err := p.loadSignatures(); err != nil {
		p.sigErr = fmt.Errorf("reading the signatures of the audit chain: %w", err)
	}
	if cfg.OIDC.Enabled() {
		secret, err := os.ReadFile(cfg.OIDC.ClientSecretFile)
		if err != nil {
			return nil, usage("oidc.client_secret_file: %v", err)
		}
		rules := make([]people.RoleRule, len(cfg.OIDC.Roles))
		for i, r := range cfg.OIDC.Roles {
			rules[i] = people.RoleRule{Value: r.Value, Role: people.Role(r.Role)}
		}
		dctx, cancel := context.WithTimeout(ctx, oidcDiscoveryTimeout)
		defer cancel()
		p.oidc, err = people.NewOIDC(dctx, people.OIDCConfig{Issuer: cfg.OIDC.Issuer, ClientID: cfg.OIDC.ClientID,
			ClientSecret: strings.TrimSpace(string(secret)), RedirectURL: cfg.OIDC.RedirectURL, Scopes: cfg.OIDC.Scopes,
			NameClaim: cfg.OIDC.NameClaim, FullNameClaim: cfg.OIDC.FullNameClaim, RoleClaim: cfg.OIDC.RoleClaim, Roles: rules}, w, nil)
		if err != nil {
			return nil, fmt.Errorf("identity provider %s: %w", cfg.OIDC.Issuer, err)
		}
	}
	return p, nil
}

// failPeople answers a refused sign-in form with the sign-in page and the
// reason, and anything else with the JSON error the pages read.
func failPeople(w http.ResponseWriter, r *http.Request, status int, err error) {
	msg := strings.TrimPrefix(err.Error(), "people: ")
	if r.Method == http.MethodPost && r.URL.Path == "/auth/signin" {
		q := url.Values{"error": {msg}}
		if next := r.PostFormValue("next"); next != "" {
			q.Set("next", next)
		}
		http.Redirect(w, r, "/signin?"+q.Encode(), http.StatusSeeOther)
		return
	}
	if strings.HasPrefix(r.URL.Path, "/auth/oidc/") {
		http.Redirect(w, r, "/signin?"+url.Values{"error": {msg}}.Encode(), http.StatusSeeOther)
		return
	}
	httpx.WriteError(w, status, msg)
}

// register mounts sign-in, sign-out and the identity provider's routes.
func (p *peopleSide) register(r chi.Router) {
	short := httpx.Timeout(httpx.RequestTimeout)
	r.With(short).Post("/auth/signin", p.web.HandleSignIn)
	r.With(short).Post("/auth/signout", p.web.HandleSignOut)
	r.With(short).Get("/auth/form", p.signInForm)
	if p.oidc != nil {
		r.With(httpx.Timeout(httpx.StreamTimeout)).Get("/auth/oidc/start", p.oidc.HandleStart)
		r.With(httpx.Timeout(httpx.StreamTimeout)).Get("/auth/oidc/callback", p.oidc.HandleCallback)
	}
}

// signInForm is GET /auth/form: the pre-sign-in session's CSRF token for
// the sign-in form, and whether a provider sign-in is offered.
func (p *peopleSide) signInForm(w http.ResponseWriter, r *http.Request) {
	s, err := p.web.PreSession(w, r)
	if err != nil {
		httpx.WriteError(w, http.StatusServiceUnavailable, err.Error())
		return
	}
	w.Header().Set("Cache-Control", "no-store")
	httpx.WriteJSON(w, http.StatusOK, map[string]any{"csrf": s.CSRF, "oidc": p.oidc != nil, "signed_in": s.SignedIn()})
}

// Sign signs for the person of s and keeps the signature for the record
// it names (implements api.Signatures and web.Signatures).
func (p *peopleSide) Sign(ctx context.Context, s people.Session, req people.SignRequest) (people.Signature, error) {
	req.Prior = p.SignaturesFor(req.Subject)
	sig, err := p.signer.Sign(ctx, s, req)
	if err != nil {
		return sig, err
	}
	p.mu.Lock()
	p.sigs[sig.Subject] = append(p.sigs[sig.Subject], sig)
	p.mu.Unlock()
	return sig, nil
}

// SignaturesFor returns the signatures of one record, oldest first.
func (p *peopleSide) SignaturesFor(subject string) []people.Signature {
	p.mu.Lock()
	defer p.mu.Unlock()
	return append([]people.Signature(nil), p.sigs[subject]...)
}

// loadSignatures reads every signature entry of the audit chain, so the
// records show the signatures made before a restart. The store's index by
// action reads those entries only, not the ingest covers around them.
func (p *peopleSide) loadSignatures() error {
	return p.st.ScanAuditAction(people.EventSignature, func(e store.AuditEntry) error {
		sig, ok := parseSignature(e)
		if ok {
			p.sigs[sig.Subject] = append(p.sigs[sig.Subject], sig)
		}
		return nil
	})
}

// parseSignature reads back what people.Signature.Detail wrote.
func parseSignature(e store.AuditEntry) (people.Signature, bool) {
	sig := people.Signature{Subject: e.Subject, AuditSeq: e.Seq}
	for _, line := range strings.Split(string(e.Detail), "\n") {
		k, v, _ := strings.Cut(line, ": ")
		switch k {
		case "user":
			sig.UserName = v
		case "full name":
			sig.FullName = v
		case "meaning":
			sig.Meaning = people.Meaning(v)
		case "time":
			sig.Time, _ = time.Parse(time.RFC3339Nano, v)
		case "sha256":
			sig.SHA256 = v
		case "method":
			sig.Method = v
		}
	}
	return sig, sig.UserName != "" && sig.SHA256 != "" && sig.Meaning != ""
}

// Accounts lists the accounts for the admin's page (implements
// web.Accounts).
func (p *peopleSide) Accounts() ([]web.AccountView, error) {
	as, err := p.st.Accounts()
	if err != nil {
		return nil, err
	}
	out := make([]web.AccountView, 0, len(as))
	for _, a := range as {
		out = append(out, web.AccountView{Name: a.Name, FullName: a.FullName, Role: a.Role, Disabled: a.Disabled,
			Locked: a.Locked, FailedSignIns: a.FailedSignIns, Provider: a.Issuer, Created: a.Created, Changed: a.Changed})
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Name < out[j].Name })
	return out, nil
}

// ManageAccount applies an admin's change (implements web.Accounts).
func (p *peopleSide) ManageAccount(ctx context.Context, by string, op web.AccountOp) (string, error) {
	return manageAccount(ctx, p.dir, p.sessions, by, op)
}

// manageAccount is one account change, from the pages or the command
// line; add and reset return the generated password, shown once.
func manageAccount(ctx context.Context, dir *people.Directory, sessions *people.Sessions, by string, op web.AccountOp) (string, error) {
	reason := op.Reason
	if reason == "" {
		reason = op.Op + " by " + cmpOr(by, "the command line")
	}
	switch op.Op {
	case "add":
		role, err := people.ParseRole(op.Role)
		if err != nil {
			return "", err
		}
		pw, err := people.GeneratePassword(op.Name, op.FullName)
		if err != nil {
			return "", err
		}
		return pw, dir.Add(ctx, by, people.NewAccount{Name: op.Name, FullName: op.FullName, Password: pw, Role: role}, reason)
	case "reset":
		a, err := dir.Lookup(op.Name)
		if err != nil {
			return "", err
		}
		pw, err := people.GeneratePassword(a.Name, a.FullName)
		if err != nil {
			return "", err
		}
		if err := dir.Reset(ctx, by, op.Name, pw, reason); err != nil {
			return "", err
		}
		endSessions(sessions, op.Name)
		return pw, nil
	case "disable":
		if err := dir.Disable(ctx, by, op.Name, reason); err != nil {
			return "", err
		}
		endSessions(sessions, op.Name)
		return "", nil
	case "enable":
		return "", dir.Enable(ctx, by, op.Name, reason)
	case "unlock":
		return "", dir.Unlock(ctx, by, op.Name, reason)
	case "role":
		role, err := people.ParseRole(op.Role)
		if err != nil {
			return "", err
		}
		return "", dir.SetRole(ctx, by, op.Name, role, reason)
	}
	return "", fmt.Errorf("%w: %q: want add, disable, enable, unlock, reset or role", people.ErrInvalid, op.Op)
}

func endSessions(s *people.Sessions, name string) {
	if s != nil {
		s.EndFor(name)
	}
}

func cmpOr(a, b string) string {
	if a != "" {
		return a
	}
	return b
}

// auditCheckFor is how long the audit page's check is shown before it
// runs again; the page says when it ran.
const auditCheckFor = time.Minute

// AuditStatus gives the chain's head, read now, and the check of its
// newest links, their signatures and the file's pages, run at most once
// every auditCheckFor, for the top of the audit page (implements
// web.AuditState).
func (p *peopleSide) AuditStatus(ctx context.Context) web.AuditStatus {
	p.checkMu.Lock()
	out := p.checked
	if out.CheckedAt.IsZero() || time.Since(out.CheckedAt) >= auditCheckFor {
		if out = p.checkAudit(ctx); ctx.Err() == nil { // a viewer gone away is no answer to keep
			p.checked = out
		}
	}
	out.Problems = append([]string(nil), out.Problems...)
	p.checkMu.Unlock()
	if p.fault != nil {
		if msg := p.fault(); msg != "" {
			out.Problems = append(out.Problems, msg)
			out.Verified = false
		}
	}
	seq, h, err := p.st.AuditHead()
	if err != nil {
		out.Problems = append(out.Problems, "head: "+err.Error())
		out.Verified = false
	}
	out.Seq, out.Hash = seq, fmt.Sprintf("%x", h[:])
	return out
}

// checkAudit runs the check AuditStatus shows.
func (p *peopleSide) checkAudit(ctx context.Context) web.AuditStatus {
	out := web.AuditStatus{Check: fmt.Sprintf("newest %d links, their signatures, and the file's pages", store.DefaultCheckLinks), CheckedAt: time.Now().UTC()}
	err := p.st.CheckQuick(ctx, store.CheckOptions{})
	var ie *store.IntegrityError
	switch {
	case err == nil && len(out.Problems) == 0:
		out.Verified = true
	case errors.As(err, &ie):
		for _, f := range ie.Faults {
			out.Problems = append(out.Problems, string(f.Kind)+": "+f.Detail)
		}
		out.Command = ie.VerifyCommand()
	case err != nil:
		out.Problems = append(out.Problems, "the check could not run: "+err.Error())
	}
	return out
}

// demoAdmin gives the demo an admin account with a new password, to be
// printed once beside the URL.
func (p *peopleSide) demoAdmin(ctx context.Context) (string, error) {
	op := web.AccountOp{Op: "add", Name: "admin", FullName: "Demo Administrator", Role: string(people.RoleAdmin), Reason: "demo: first administrator"}
	if _, err := p.dir.Lookup("admin"); err == nil {
		op = web.AccountOp{Op: "reset", Name: "admin", Reason: "demo: new password at start"}
	}
	return manageAccount(ctx, p.dir, p.sessions, "", op)
}
