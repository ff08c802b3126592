package access

import (
	"net/http"
	"time"

	"github.com/prometheus/common/model"

	"cleanmon/cmd/cleanmon/internal/people"
)

// personOf is the person signed in on the request's session, if any. A
// request that carries an Authorization header is a machine's, judged by
// its token alone, even if a browser also sent a cookie.
func personOf(r *http.Request) (people.Person, bool) {
	if r.Header.Get("Authorization") != "" {
		return people.Person{}, false
	}
	s, ok := people.FromContext(r.Context())
	if !ok || !s.SignedIn() {
		return people.Person{}, false
	}
	return *s.Person, true
}

// sessionOf is the request's session, signed in or not.
func sessionOf(r *http.Request) (people.Session, bool) {
	return people.FromContext(r.Context())
}

// SignMeanings are the meanings of a report signature a role may give:
// operators sign the work they performed; QA and admins also review and
// approve. (The second-person rule is people.CanApprove's.)
func SignMeanings(role string) []string {
	switch role {
	case RoleOperator:
		return []string{string(people.MeaningPerformed)}
	case RoleQA, RoleAdmin:
		return []string{string(people.MeaningPerformed), string(people.MeaningReviewed), string(people.MeaningApproved)}
	}
	return []string{}
}

// MaySign reports whether role may give a report signature of meaning.
func MaySign(role, meaning string) bool {
	for _, m := range SignMeanings(role) {
		if m == meaning {
			return true
		}
	}
	return false
}

// SetSignaturesRequired turns on the refusal of acknowledgements and state
// changes by tokens: only a signed-in person's signature makes them.
func (a *Authorizer) SetSignaturesRequired(on bool) { a.sigRequired.Store(on) }

// SignaturesRequired reports the setting of SetSignaturesRequired.
func (a *Authorizer) SignaturesRequired() bool { return a.sigRequired.Load() }

// AccountsConfig is the `accounts:` section of the site configuration:
// the rules for people who sign in on the pages.
type AccountsConfig struct {
	// MinPasswordLength: default 15, never below 8.
	MinPasswordLength int `yaml:"min_password_length"`
	// Lockout is how many wrong passwords in a row lock an account
	// (default 5).
	Lockout int `yaml:"lockout"`
	// IdleTimeout signs a person out after this long without a request
	// of theirs (default 15m); AbsoluteTimeout after this long whatever
	// they do (default 12h).
	IdleTimeout     model.Duration `yaml:"idle_timeout"`
	AbsoluteTimeout model.Duration `yaml:"absolute_timeout"`
	// SecureCookies marks the session cookie Secure although TLS ends at
	// a proxy in front (under the daemon's own TLS it always is).
	SecureCookies bool `yaml:"secure_cookies"`
	// TrustedOrigins are other origins whose pages may post here (the
	// public name of a proxy), "https://host:port".
	TrustedOrigins []string `yaml:"trusted_origins"`
}

// Idle is the idle time-out in force.
func (c AccountsConfig) Idle() time.Duration { return time.Duration(c.IdleTimeout) }

// Absolute is the absolute time-out in force.
func (c AccountsConfig) Absolute() time.Duration { return time.Duration(c.AbsoluteTimeout) }

// OIDCConfig is the `oidc:` section: sign-in through the site's identity
// provider. Absent (no issuer), only local accounts sign in.
type OIDCConfig struct {
	Issuer           string `yaml:"issuer"`
	ClientID         string `yaml:"client_id"`
	ClientSecretFile string `yaml:"client_secret_file"`
	// RedirectURL is this daemon's /auth/oidc/callback as the browser
	// reaches it, registered at the provider.
	RedirectURL   string         `yaml:"redirect_url"`
	Scopes        []string       `yaml:"scopes"`
	NameClaim     string         `yaml:"name_claim"`
	FullNameClaim string         `yaml:"full_name_claim"`
	RoleClaim     string         `yaml:"role_claim"`
	Roles         []OIDCRoleRule `yaml:"roles"`
}

// OIDCRoleRule maps one value of the role claim to a role; the first
// rule that matches wins, and a person no rule matches is refused.
type OIDCRoleRule struct {
	Value string `yaml:"value"`
	Role  string `yaml:"role"`
}

// Enabled reports whether an identity provider is configured.
func (c OIDCConfig) Enabled() bool { return c.Issuer != "" }
