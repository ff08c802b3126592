package daemon

import (
	"context"
	"strings"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/store"
)

// The audit page's check runs at most once a minute (it reads every page
// of the file) while the head is read at every view; an integrity fault
// the daemon found is shown whatever the kept check says.
func TestAuditStatusKeepsItsCheckButNotAFault(t *testing.T) {
	st, err := store.Open(t.TempDir(), store.Options{NoSync: true})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	p, err := newPeople(context.Background(), st, &site.Config{}, false)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	first := p.AuditStatus(ctx)
	if !first.Verified || len(first.Problems) != 0 || first.CheckedAt.IsZero() {
		t.Fatalf("a sound store: %+v", first)
	}
	if _, _, err := st.AppendAudit(ctx, store.AuditEntry{Actor: "test", Action: store.AuditConfigLoad, Subject: "site.yaml", Reason: "a new head"}); err != nil {
		t.Fatal(err)
	}
	second := p.AuditStatus(ctx)
	if !second.CheckedAt.Equal(first.CheckedAt) {
		t.Errorf("the check ran again within %s: %s then %s", auditCheckFor, first.CheckedAt, second.CheckedAt)
	}
	if second.Seq != first.Seq+1 || second.Hash == first.Hash {
		t.Errorf("the head was not read again: #%d %s then #%d %s", first.Seq, first.Hash, second.Seq, second.Hash)
	}
	p.fault = func() string { return "store integrity fault: pages: a damaged page" }
	third := p.AuditStatus(ctx)
	if third.Verified || !strings.Contains(strings.Join(third.Problems, "|"), "damaged page") {
		t.Errorf("a fault the daemon found is not shown: %+v", third)
	}
	p.checked.CheckedAt = time.Now().Add(-2 * auditCheckFor)
	if fourth := p.AuditStatus(ctx); !fourth.CheckedAt.After(first.CheckedAt) {
		t.Errorf("a check older than %s was kept: %s", auditCheckFor, fourth.CheckedAt)
	}
}
