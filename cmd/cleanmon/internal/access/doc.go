// Package access owns who may do what on the daemon's HTTP side: the
// bearer tokens of the site configuration (kept as SHA-256 digests), the
// roles and what each may do, the per-token rate limits, and the TLS
// certificate reloaded without a restart. Its Require middleware records
// the token's name, or the signed-in person of the pages' session, as the
// request's identity (httpx.Identity).
package access

import "errors"

// Config is the `access:` section of the site configuration: who may use
// the HTTP API.
type Config struct {
	// OpenReads lets GET endpoints answer without a token.
	OpenReads bool            `yaml:"open_reads"`
	Tokens    []TokenConfig   `yaml:"tokens"`
	RateLimit RateLimitConfig `yaml:"rate_limit"`
}

// TokenConfig is one bearer token: the file keeps only the SHA-256 of the
// secret, so reading the configuration does not give access.
type TokenConfig struct {
	Name   string `yaml:"name"`
	SHA256 string `yaml:"sha256"`
	Role   string `yaml:"role"`
}

// Roles of an API token or a person (people have no ingest role; tokens
// have no qa role).
const (
	RoleIngest   = "ingest"
	RoleViewer   = "viewer"
	RoleOperator = "operator"
	RoleQA       = "qa"
	RoleAdmin    = "admin"
)

// ErrInvalid marks an access section that cannot be used.
var ErrInvalid = errors.New("invalid configuration")
