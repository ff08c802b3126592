package people

import (
	"errors"
	"testing"
)

func TestIdentityFromClaims(t *testing.T) {
	o := &OIDC{cfg: OIDCConfig{NameClaim: "preferred_username", FullNameClaim: "name", RoleClaim: "realm_access.roles",
		Roles: []RoleRule{{"cm-admin", RoleAdmin}, {"cm-qa", RoleQA}, {"cm-op", RoleOperator}}}}
	claims := func(roles any) map[string]any {
		return map[string]any{"preferred_username": "Lena", "name": "Lena Sorensen", "realm_access": map[string]any{"roles": roles}}
	}
	cases := []struct {
		name   string
		claims map[string]any
		role   Role
		err    error
	}{
		{"list, first rule wins", claims([]any{"cm-op", "cm-qa"}), RoleQA, nil},
		{"single string", claims("cm-op"), RoleOperator, nil},
		{"admin listed first in the rules", claims([]any{"cm-qa", "cm-admin"}), RoleAdmin, nil},
		{"no mapped value", claims([]any{"staff"}), "", ErrOIDC},
		{"claim missing", map[string]any{"preferred_username": "lena"}, "", ErrOIDC},
		{"not strings", claims([]any{1, true}), "", ErrOIDC},
		{"dotted name taken as is first", map[string]any{"preferred_username": "lena", "realm_access.roles": "cm-qa"}, RoleQA, nil},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			e, err := o.identity("https://idp.veldmark.example", "sub-1", tc.claims)
			if tc.err != nil {
				if !errors.Is(err, tc.err) {
					t.Fatalf("err = %v, want %v", err, tc.err)
				}
				return
			}
			if err != nil || e.Role != tc.role || e.Name != "lena" || e.Issuer != "https://idp.veldmark.example" || e.Subject != "sub-1" {
				t.Fatalf("identity = %+v, %v; want role %s, name lena", e, err, tc.role)
			}
		})
	}
}
