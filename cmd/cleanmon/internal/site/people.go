package site

import (
	"fmt"
	"net/url"
	"time"

	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/people"
)

// checkPeople checks the accounts and oidc sections.
func (d *nodeDecoder) checkPeople(a access.AccountsConfig, o access.OIDCConfig) {
	if a.MinPasswordLength != 0 && a.MinPasswordLength < people.MinPasswordLenFloor {
		d.add("accounts.min_password_length", "%d: at least %d", a.MinPasswordLength, people.MinPasswordLenFloor)
	}
	if a.MinPasswordLength > people.MaxPasswordLen {
		d.add("accounts.min_password_length", "%d: at most %d", a.MinPasswordLength, people.MaxPasswordLen)
	}
	if a.Lockout < 0 {
		d.add("accounts.lockout", "%d: want the number of wrong passwords in a row that lock an account (default %d)", a.Lockout, people.DefaultMaxFailures)
	}
	if a.Idle() < 0 || (a.Idle() > 0 && a.Idle() < time.Second) {
		d.add("accounts.idle_timeout", "%s: want at least 1s (default %s)", a.Idle(), people.DefaultIdleTimeout)
	}
	if a.Absolute() < 0 || (a.Absolute() > 0 && a.Absolute() < a.Idle()) {
		d.add("accounts.absolute_timeout", "%s: want at least the idle time-out (default %s)", a.Absolute(), people.DefaultAbsoluteTimeout)
	}
	for i, origin := range a.TrustedOrigins {
		if u, err := url.Parse(origin); err != nil || (u.Scheme != "https" && u.Scheme != "http") || u.Host == "" || u.Path != "" {
			d.add(fmt.Sprintf("accounts.trusted_origins[%d]", i), "%q: want scheme://host[:port]", origin)
		}
	}
	if !o.Enabled() {
		if o.ClientID != "" || o.RedirectURL != "" || len(o.Roles) > 0 {
			d.add("oidc.issuer", "missing: the oidc section needs the provider's issuer URL")
		}
		return
	}
	if u, err := url.Parse(o.Issuer); err != nil || (u.Scheme != "https" && u.Scheme != "http") || u.Host == "" {
		d.add("oidc.issuer", "%q: want the provider's issuer URL", o.Issuer)
	}
	if o.ClientID == "" {
		d.add("oidc.client_id", "missing: the client ID registered at the provider")
	}
	if o.ClientSecretFile == "" {
		d.add("oidc.client_secret_file", "missing: a file holding the client secret (kept out of this file)")
	}
	if u, err := url.Parse(o.RedirectURL); err != nil || u.Host == "" || u.Path != "/auth/oidc/callback" {
		d.add("oidc.redirect_url", "%q: want this daemon's https://HOST[:PORT]/auth/oidc/callback as the browser reaches it", o.RedirectURL)
	}
	if o.RoleClaim == "" {
		d.add("oidc.role_claim", "missing: the claim that carries the person's groups or roles")
	}
	if len(o.Roles) == 0 {
		d.add("oidc.roles", "missing: map at least one value of the role claim to a role (a person no rule matches is refused)")
	}
	for i, r := range o.Roles {
		if r.Value == "" {
			d.add(fmt.Sprintf("oidc.roles[%d].value", i), "missing: the claim value")
		}
		if _, err := people.ParseRole(r.Role); err != nil {
			d.add(fmt.Sprintf("oidc.roles[%d].role", i), "%q: want viewer, operator, qa or admin", r.Role)
		}
	}
}
