package store

import (
	"context"
	"strings"
	"testing"
	"time"
)

// TestReadableDetail: every entry the store writes of its own reads as
// text, and a batch names the series it covers.
func TestReadableDetail(t *testing.T) {
	st, err := Open(t.TempDir(), Options{NoSync: true})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	ctx := context.Background()
	now := time.Now().UTC().Truncate(time.Second)
	if err := st.SetOperatingState(ctx, OperatingState{Zone: "assembly", State: "at-rest", By: "Piotr Lind (piotr)", Reason: "end of shift", Time: now}); err != nil {
		t.Fatal(err)
	}
	if _, err := st.Backup(&strings.Builder{}); err != nil {
		t.Fatal(err)
	}
	seen := map[string]AuditDetail{}
	if err := st.ScanAudit(0, 0, func(e AuditEntry) error {
		seen[e.Action] = ReadableDetail(e)
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	for _, action := range []string{AuditChainStart, AuditOpState, AuditBackup} {
		d, ok := seen[action]
		if !ok {
			t.Errorf("no %s entry", action)
			continue
		}
		if strings.Contains(d.Text, "binary detail") {
			t.Errorf("%s not decoded: %s", action, d.Text)
		}
	}
	if d := seen[AuditOpState]; !strings.Contains(d.Text, "zone assembly: 1") || len(d.Names) != 1 || d.Names[0] != "assembly" {
		t.Errorf("operating-state detail %+v, want zone assembly covered once", d)
	}
	if d := seen[AuditBackup]; !strings.Contains(d.Text, "copy's audit head: #") {
		t.Errorf("backup detail %q", d.Text)
	}
	// Something the store does not know stays visible, as hex.
	if d := ReadableDetail(AuditEntry{Action: "other", Detail: []byte{0, 1, 2}}); d.Text != "binary detail (hex): 000102" {
		t.Errorf("unknown binary: %q", d.Text)
	}
}
