package store

import (
	"context"
	"slices"
	"testing"
	"time"
)

func TestAppendReadingsMarked(t *testing.T) {
	s := quick(t)
	t0 := time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
	a, b, c := reading("pc-1", t0, 10), reading("pc-1", t0.Add(time.Minute), 20), reading("pc-2", t0, 30)
	got, err := s.AppendReadingsMarked(context.Background(), []Reading{a, b})
	if err != nil || !slices.Equal(got, []Outcome{Stored, Stored}) {
		t.Fatalf("first call: %v %v", got, err)
	}
	// a is stored already; c is new, then repeated within the call; b again
	// but with other counts is a conflict, and the stored b stays.
	b2 := reading("pc-1", t0.Add(time.Minute), 99)
	got, err = s.AppendReadingsMarked(context.Background(), []Reading{a, c, c, b2})
	if err != nil || !slices.Equal(got, []Outcome{Duplicate, Stored, Duplicate, Conflict}) {
		t.Fatalf("second call: %v %v, want [duplicate stored duplicate conflict]", got, err)
	}
	if rs := scanAll(t, s, "pc-1", t0.Add(time.Minute), time.Time{}); len(rs) != 1 || rs[0].Counts[0] != b.Counts[0] {
		t.Errorf("the first reading must stay: %+v", rs)
	}
	if n := len(scanAll(t, s, "pc-2", time.Time{}, time.Time{})); n != 1 {
		t.Errorf("pc-2 holds %d readings, want 1", n)
	}
}
