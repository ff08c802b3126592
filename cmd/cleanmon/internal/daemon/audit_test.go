package daemon

import (
	"cleanmon/store"
	"context"
	"io"
	"log/slog"
	"strings"
	"testing"
	"time"
)

func TestClockWatch(t *testing.T) {
	base := time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
	cw := clockWatch{tolerance: 2 * time.Second}
	steps := []struct {
		wall time.Time
		mono time.Duration
		want time.Duration
		hit  bool
	}{
		{base, 0, 0, false},
		{base.Add(time.Second), time.Second, 0, false},                           // in step
		{base.Add(2500 * time.Millisecond), 2 * time.Second, 0, false},           // 0.5 s drift: within tolerance
		{base.Add(-57 * time.Second), 3 * time.Second, -60 * time.Second, true},  // stepped back a minute
		{base.Add(-56 * time.Second), 4 * time.Second, 0, false},                 // runs on from there
		{base.Add(time.Hour - 55*time.Second), 5 * time.Second, time.Hour, true}, // an hour forward
	}
	for i, s := range steps {
		got, hit := cw.check(s.wall, s.mono)
		if hit != s.hit || (hit && (got-s.want).Abs() > 600*time.Millisecond) {
			t.Errorf("step %d: %v %v, want %v %v", i, got, hit, s.want, s.hit)
		}
	}
}

// A step of the clock is an entry of the audit chain.
func TestClockStepIsAudited(t *testing.T) {
	st, err := store.Open(t.TempDir(), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	a := auditLog{st, slog.New(slog.NewTextHandler(io.Discard, nil))}
	a.clockStepped(context.Background(), -90*time.Second)
	found := false
	st.ScanAudit(0, 0, func(e store.AuditEntry) error {
		found = found || (e.Action == "clock-step" && strings.Contains(e.Reason, "backward by 1m30s"))
		return nil
	})
	if !found {
		t.Error("no clock-step entry in the audit chain")
	}
}

// A damaged store file: the daemon refuses to start and points at verify
