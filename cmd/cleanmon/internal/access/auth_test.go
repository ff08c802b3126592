package access

import "testing"

func TestGrants(t *testing.T) {
	// The role table of the access rules, checked cell by cell.
	table := map[string][4]bool{ // read, ingest, operate, admin
		RoleIngest:   {false, true, false, false},
		RoleViewer:   {true, false, false, false},
		RoleOperator: {true, false, true, false},
		RoleAdmin:    {true, true, true, true},
		"":           {false, false, false, false},
		"root":       {false, false, false, false},
	}
	for role, w := range table {
		for p, want := range w {
			if got := Grants(role, Permission(p)); got != want {
				t.Errorf("Grants(%q, %s) = %v, want %v", role, Permission(p), got, want)
			}
		}
	}
}
