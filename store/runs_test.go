package store

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"
)

func openRuns(t *testing.T) (*Store, string) {
	t.Helper()
	dir := t.TempDir()
	s, err := Open(dir, Options{NoSync: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = s.Close() })
	return s, dir
}

func rt(h, m int) time.Time { return time.Date(2026, 3, 2, h, m, 0, 0, time.UTC) }

func TestRunCreateCloseGetList(t *testing.T) {
	s, dir := openRuns(t)
	ctx := context.Background()
	runs := []Run{
		{ID: "SF-0312", Zone: "assembly", Start: rt(6, 0), End: rt(14, 0), Product: "lens L-40", Lot: "L40-112"},
		{ID: "SF-0313", Zone: "assembly", Start: rt(14, 0), Product: "lens L-40", Lot: "L40-113"},
		{ID: "MT-7", Zone: "metrology", Start: rt(8, 0), End: rt(9, 0)},
	}
	if err := s.CreateRuns(ctx, runs, "operator-ana"); err != nil {
		t.Fatal(err)
	}
	if runs[0].By != "" || !runs[0].Recorded.IsZero() {
		t.Errorf("CreateRuns changed the caller's slice: %+v", runs[0])
	}
	got, err := s.Run("SF-0313")
	if err != nil || !got.Open() || got.Lot != "L40-113" || got.By != "operator-ana" || got.Recorded.IsZero() {
		t.Fatalf("Run = %+v, %v", got, err)
	}
	tests := []struct {
		name     string
		zone     string
		from, to time.Time
		want     []string
	}{
		{"whole zone", "assembly", time.Time{}, time.Time{}, []string{"SF-0312", "SF-0313"}},
		{"touching the end of the first", "assembly", rt(14, 0), rt(15, 0), []string{"SF-0312", "SF-0313"}},
		{"open run reaches on", "assembly", rt(20, 0), rt(21, 0), []string{"SF-0313"}},
		{"before everything", "assembly", rt(1, 0), rt(5, 59), nil},
		{"every zone", "", rt(8, 30), rt(8, 30), []string{"SF-0312", "MT-7"}},
	}
	for _, tc := range tests {
		rs, err := s.Runs(tc.zone, tc.from, tc.to)
		if err != nil {
			t.Fatal(err)
		}
		var ids []string
		for _, r := range rs {
			ids = append(ids, r.ID)
		}
		if strings.Join(ids, ",") != strings.Join(tc.want, ",") {
			t.Errorf("%s: %v, want %v", tc.name, ids, tc.want)
		}
	}
	closed, err := s.CloseRun(ctx, "SF-0313", rt(22, 0), "operator-ben")
	if err != nil || !closed.End.Equal(rt(22, 0)) || closed.By != "operator-ana" {
		t.Fatalf("CloseRun = %+v, %v", closed, err)
	}
	if _, err := s.CloseRun(ctx, "SF-0313", rt(23, 0), "operator-ben"); !errors.Is(err, ErrInvalid) {
		t.Errorf("closing a closed run: %v, want ErrInvalid", err)
	}
	if _, err := s.CloseRun(ctx, "nope", rt(23, 0), ""); !errors.Is(err, ErrNotFound) {
		t.Errorf("closing an unknown run: %v, want ErrNotFound", err)
	}
	if _, err := s.Run("nope"); !errors.Is(err, ErrNotFound) {
		t.Errorf("unknown run: %v, want ErrNotFound", err)
	}
	// Every change is on the audit chain, and the file still verifies.
	var actions []string
	if err := s.ScanAudit(0, 0, func(e AuditEntry) error {
		if strings.HasPrefix(e.Action, "run-") {
			actions = append(actions, e.Action+" "+e.Actor+" "+e.Subject)
		}
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	want := "run-create operator-ana SF-0312: assembly|run-create operator-ana SF-0313: assembly|run-create operator-ana MT-7: metrology|run-close operator-ben SF-0313: assembly"
	if strings.Join(actions, "|") != want {
		t.Errorf("audit %q, want %q", actions, want)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if problems, err := Verify(dir); err != nil || len(problems) != 0 {
		t.Errorf("Verify after runs: %v, %v", problems, err)
	}
	s2, err := Open(dir, Options{NoSync: true})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	if got, err := s2.Run("SF-0313"); err != nil || !got.End.Equal(rt(22, 0)) {
		t.Errorf("after reopen: %+v, %v", got, err)
	}
}

func TestRunValidation(t *testing.T) {
	s, _ := openRuns(t)
	ctx := context.Background()
	good := Run{ID: "R-1", Zone: "assembly", Start: rt(6, 0), End: rt(7, 0)}
	if err := s.CreateRuns(ctx, []Run{good}, ""); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name   string
		runs   []Run
		index  int
		field  string
		exists bool
	}{
		{"empty ID", []Run{{Zone: "assembly", Start: rt(6, 0)}}, 0, "ID", false},
		{"empty zone", []Run{{ID: "R-2", Start: rt(6, 0)}}, 0, "Zone", false},
		{"no start", []Run{{ID: "R-2", Zone: "assembly"}}, 0, "Start", false},
		{"end at start", []Run{{ID: "R-2", Zone: "assembly", Start: rt(6, 0), End: rt(6, 0)}}, 0, "End", false},
		{"end before start", []Run{{ID: "R-2", Zone: "assembly", Start: rt(6, 0), End: rt(5, 0)}}, 0, "End", false},
		{"long lot", []Run{{ID: "R-2", Zone: "assembly", Start: rt(6, 0), Lot: strings.Repeat("x", 200)}}, 0, "Lot", false},
		{"ID already stored", []Run{{ID: "R-2", Zone: "assembly", Start: rt(6, 0)}, good}, 1, "ID", true},
		{"ID twice in one call", []Run{{ID: "R-3", Zone: "a", Start: rt(6, 0)}, {ID: "R-3", Zone: "a", Start: rt(7, 0)}}, 1, "ID", true},
	}
	for _, tc := range tests {
		err := s.CreateRuns(ctx, tc.runs, "")
		var re *RecordError
		if !errors.As(err, &re) || !errors.Is(err, ErrInvalid) || re.Index != tc.index || re.Field != tc.field || errors.Is(err, ErrRunExists) != tc.exists {
			t.Errorf("%s: %v, want a RecordError at %d on %s (exists %v)", tc.name, err, tc.index, tc.field, tc.exists)
		}
	}
	// Nothing of a refused call was stored.
	rs, err := s.Runs("", time.Time{}, time.Time{})
	if err != nil || len(rs) != 1 {
		t.Errorf("after refused calls: %d runs, %v; want only R-1", len(rs), err)
	}
	if _, err := s.CloseRun(ctx, "R-1", rt(8, 0), ""); !errors.Is(err, ErrInvalid) {
		t.Errorf("closing a run with an end: %v", err)
	}
	if _, err := s.Runs("", rt(8, 0), rt(7, 0)); !errors.Is(err, ErrInvalid) {
		t.Errorf("reversed range: %v", err)
	}
}

func TestRunCodecDamage(t *testing.T) {
	r := Run{ID: "R-9", Zone: "assembly", Start: rt(6, 0), Product: "p", Lot: "l", By: "b", Recorded: rt(6, 1)}
	v := encodeRun([]byte(r.ID), &r)
	got, err := decodeRun([]byte(r.ID), v)
	if err != nil || got != r {
		t.Fatalf("round trip %+v, %v; want %+v", got, err, r)
	}
	v[3] ^= 1
	if _, err := decodeRun([]byte(r.ID), v); !errors.Is(err, ErrCorrupt) {
		t.Errorf("flipped bit: %v, want ErrCorrupt", err)
	}
}
