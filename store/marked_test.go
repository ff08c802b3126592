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
	if err != nil || !slices.Equal(got, []bool{true, true}) {
		t.Fatalf("first call: %v %v", got, err)
	}
	// a is stored already; c is new, then repeated within the call.
	got, err = s.AppendReadingsMarked(context.Background(), []Reading{a, c, c})
	if err != nil || !slices.Equal(got, []bool{false, true, false}) {
		t.Fatalf("second call: %v %v, want [false true false]", got, err)
	}
	if n := len(scanAll(t, s, "pc-2", time.Time{}, time.Time{})); n != 1 {
		t.Errorf("pc-2 holds %d readings, want 1", n)
	}
}
