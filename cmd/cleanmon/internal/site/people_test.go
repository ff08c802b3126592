package site

import (
	"strings"
	"testing"
)

// TestPeopleSections: the accounts and oidc sections are checked, each
// problem named at its key.
func TestPeopleSections(t *testing.T) {
	base := "site: \"Veldmark Photonics, building C\"\nzones:\n  - {id: corridor, name: Corridor}\n"
	cases := []struct {
		name, yaml, want string
	}{
		{"short minimum", "accounts: {min_password_length: 6}\n", "accounts.min_password_length"},
		{"negative lockout", "accounts: {lockout: -1}\n", "accounts.lockout"},
		{"idle under a second", "accounts: {idle_timeout: \"500ms\"}\n", "accounts.idle_timeout"},
		{"absolute under idle", "accounts: {idle_timeout: \"1h\", absolute_timeout: \"30m\"}\n", "accounts.absolute_timeout"},
		{"origin with a path", "accounts: {trusted_origins: [\"https://proxy.example/x\"]}\n", "accounts.trusted_origins[0]"},
		{"oidc without issuer", "oidc: {client_id: cleanmon}\n", "oidc.issuer"},
		{"oidc bad callback", "oidc: {issuer: \"https://id.example\", client_id: c, client_secret_file: /s, redirect_url: \"https://h/cb\", role_claim: r, roles: [{value: a, role: qa}]}\n", "oidc.redirect_url"},
		{"oidc unknown role", "oidc: {issuer: \"https://id.example\", client_id: c, client_secret_file: /s, redirect_url: \"https://h/auth/oidc/callback\", role_claim: r, roles: [{value: a, role: root}]}\n", "oidc.roles[0].role"},
		{"oidc no roles", "oidc: {issuer: \"https://id.example\", client_id: c, client_secret_file: /s, redirect_url: \"https://h/auth/oidc/callback\", role_claim: r}\n", "oidc.roles"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Load("site.yaml", []byte(base+c.yaml))
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want one naming %s", err, c.want)
			}
		})
	}
	good := base + "accounts: {min_password_length: 12, lockout: 3, idle_timeout: \"10m\", absolute_timeout: \"8h\"}\nsignatures_required: true\n" +
		"oidc: {issuer: \"https://id.example\", client_id: c, client_secret_file: /s, redirect_url: \"https://h/auth/oidc/callback\", role_claim: groups, roles: [{value: qa-team, role: qa}]}\n"
	cfg, err := Load("site.yaml", []byte(good))
	if err != nil {
		t.Fatal(err)
	}
	if !cfg.SignaturesRequired || cfg.Accounts.Lockout != 3 || cfg.OIDC.Roles[0].Role != "qa" {
		t.Errorf("loaded %+v %+v", cfg.Accounts, cfg.OIDC)
	}
}
