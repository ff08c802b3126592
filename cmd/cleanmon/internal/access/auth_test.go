package access

import "testing"

func TestGrants(t *testing.T) {
	// The role table of the access rules, checked cell by cell.
	table := map[string][6]bool{ // read, ingest, operate, admin, record runs, sign
		RoleIngest:   {false, true, false, false, true, false},
		RoleViewer:   {true, false, false, false, false, false},
		RoleOperator: {true, false, true, false, true, true},
		RoleQA:       {true, false, false, false, false, true},
		RoleAdmin:    {true, true, true, true, true, true},
		"":           {false, false, false, false, false, false},
		"root":       {false, false, false, false, false, false},
	}
	for role, w := range table {
		for p, want := range w {
			if got := Grants(role, Permission(p)); got != want {
				t.Errorf("Grants(%q, %s) = %v, want %v", role, Permission(p), got, want)
			}
		}
	}
}

func TestSignMeanings(t *testing.T) {
	cases := []struct {
		role, meaning string
		want          bool
	}{
		{RoleOperator, "performed", true},
		{RoleOperator, "approved", false},
		{RoleOperator, "reviewed", false},
		{RoleQA, "approved", true},
		{RoleQA, "reviewed", true},
		{RoleAdmin, "approved", true},
		{RoleViewer, "performed", false},
		{RoleIngest, "performed", false},
		{RoleQA, "acknowledged", false}, // not a report meaning
	}
	for _, c := range cases {
		if got := MaySign(c.role, c.meaning); got != c.want {
			t.Errorf("MaySign(%q, %q) = %v, want %v", c.role, c.meaning, got, c.want)
		}
	}
}
