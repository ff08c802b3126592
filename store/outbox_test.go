package store

import (
	"context"
	"reflect"
	"strings"
	"testing"
	"time"
	"unicode/utf8"
)

// outboxFixture queues five records for every notifier and returns the
// webhook's items.
func outboxFixture(t *testing.T) (*Store, []OutboxItem) {
	t.Helper()
	s := quick(t)
	var recs []AlarmRecord
	for i := 0; i < 5; i++ {
		recs = append(recs, alarmRec("a-1", t0.Add(time.Duration(i)*time.Minute), "active"))
	}
	recordOK(t, s, recs, notifierNames)
	items := outboxAll(t, s, "webhook")
	if len(items) != 5 {
		t.Fatalf("%d webhook items", len(items))
	}
	return s, items
}

func itemIDs(items []OutboxItem) []uint64 {
	var ids []uint64
	for _, it := range items {
		ids = append(ids, it.ID)
	}
	return ids
}

func TestOutboxDue(t *testing.T) {
	s, items := outboxFixture(t)
	ctx := context.Background()
	id := itemIDs(items)
	// Items 1 and 3 wait out a backoff until t0+10m, item 4 until t0+20m.
	for _, r := range []struct {
		i    int
		next time.Time
	}{{1, t0.Add(10 * time.Minute)}, {3, t0.Add(10 * time.Minute)}, {4, t0.Add(20 * time.Minute)}} {
		if err := s.OutboxRetry(ctx, id[r.i], 1, r.next, "timeout"); err != nil {
			t.Fatal(err)
		}
	}
	cases := []struct {
		name  string
		now   time.Time
		limit int
		want  []uint64
	}{
		{"before any backoff ends", t0, 10, []uint64{id[0], id[2]}},
		{"one nanosecond early", t0.Add(10*time.Minute - 1), 10, []uint64{id[0], id[2]}},
		{"at the next attempt", t0.Add(10 * time.Minute), 10, []uint64{id[0], id[1], id[2], id[3]}},
		{"all due", t0.Add(time.Hour), 10, id},
		{"limit takes the oldest", t0.Add(time.Hour), 2, id[:2]},
		{"limit counts due items only", t0, 1, id[:1]},
		{"far future (the dispatcher's probe)", t0.AddDate(100, 0, 0), 10, id},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := s.OutboxDue("webhook", c.now, c.limit)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(itemIDs(got), c.want) {
				t.Fatalf("due %v, want %v", itemIDs(got), c.want)
			}
		})
	}
	bad := []struct {
		name     string
		notifier string
		limit    int
	}{{"zero limit", "webhook", 0}, {"negative limit", "webhook", -1}, {"empty notifier", "", 5}}
	for _, c := range bad {
		t.Run(c.name, func(t *testing.T) {
			_, err := s.OutboxDue(c.notifier, t0, c.limit)
			wantErr(t, err, ErrInvalid)
		})
	}
	if got, err := s.OutboxDue("pager", t0, 5); err != nil || len(got) != 0 {
		t.Fatalf("unknown notifier: %v %v", got, err)
	}
}

func TestOutboxRetry(t *testing.T) {
	s, items := outboxFixture(t)
	ctx := context.Background()
	it := items[2]
	next := t0.Add(30 * time.Second)
	if err := s.OutboxRetry(ctx, it.ID, 3, next, "webhook: 503 Service Unavailable"); err != nil {
		t.Fatal(err)
	}
	got := outboxAll(t, s, "webhook")[2]
	want := it
	want.Attempts, want.NextAttempt, want.LastError = 3, next, "webhook: 503 Service Unavailable"
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("after Retry\n got %+v\nwant %+v", got, want)
	}
	// A zero next makes it due at once again.
	if err := s.OutboxRetry(ctx, it.ID, 4, time.Time{}, "rejected"); err != nil {
		t.Fatal(err)
	}
	if due, _ := s.OutboxDue("webhook", t0, 10); len(due) != 5 || due[2].Attempts != 4 || due[2].LastError != "rejected" {
		t.Fatalf("after Retry with zero next: %+v", due)
	}
	// A long error is cut at a character boundary: 4 095 ASCII bytes, then
	// a two-byte character that would cross the 4 096-byte cap.
	long := strings.Repeat("x", maxReasonLen-1) + "é" + strings.Repeat("y", 100)
	if err := s.OutboxRetry(ctx, it.ID, 5, next, long); err != nil {
		t.Fatal(err)
	}
	got = outboxAll(t, s, "webhook")[2]
	if len(got.LastError) != maxReasonLen-1 || !utf8.ValidString(got.LastError) {
		t.Fatalf("long error kept as %d bytes, valid %v", len(got.LastError), utf8.ValidString(got.LastError))
	}
	others := outboxAll(t, s, "alertmanager")
	for _, o := range others {
		if o.Attempts != 0 {
			t.Fatalf("Retry of a webhook item changed an alertmanager item: %+v", o)
		}
	}
	bad := []struct {
		name     string
		id       uint64
		attempts int
		next     time.Time
		want     error
	}{
		{"negative attempts", it.ID, -1, next, ErrInvalid},
		{"next before 1970", it.ID, 1, time.Date(1960, 1, 1, 0, 0, 0, 0, time.UTC), ErrInvalid},
		{"unknown ID", 9999, 1, next, ErrNotFound},
		{"ID zero", 0, 1, next, ErrNotFound},
	}
	before := outboxAll(t, s, "webhook")
	for _, c := range bad {
		t.Run(c.name, func(t *testing.T) {
			err := s.OutboxRetry(ctx, c.id, c.attempts, c.next, "x")
			wantErr(t, err, c.want)
			if !reflect.DeepEqual(outboxAll(t, s, "webhook"), before) {
				t.Fatal("a rejected Retry changed the outbox")
			}
		})
	}
}

func TestOutboxDone(t *testing.T) {
	s, items := outboxFixture(t)
	ctx := context.Background()
	if err := s.OutboxDone(ctx, items[1].ID); err != nil {
		t.Fatal(err)
	}
	want := []uint64{items[0].ID, items[2].ID, items[3].ID, items[4].ID}
	if got := itemIDs(outboxAll(t, s, "webhook")); !reflect.DeepEqual(got, want) {
		t.Fatalf("after Done %v, want %v", got, want)
	}
	if n, _ := s.OutboxLen("webhook"); n != 4 {
		t.Fatalf("OutboxLen after Done %d", n)
	}
	wantErr(t, s.OutboxDone(ctx, items[1].ID), ErrNotFound)
	wantErr(t, s.OutboxDone(ctx, 1<<40), ErrNotFound)
	// The journal keeps the delivered record.
	if got := journalAll(t, s, time.Time{}, time.Time{}); len(got) != 5 {
		t.Fatalf("Done touched the journal: %d entries", len(got))
	}
}

// TestOutboxPerNotifier: each notifier's queue is its own; delivering or
// failing for one leaves the others as they were.
func TestOutboxPerNotifier(t *testing.T) {
	s, web := outboxFixture(t)
	ctx := context.Background()
	am := outboxAll(t, s, "alertmanager")
	log := outboxAll(t, s, "log")
	for i := range web {
		if web[i].Seq != am[i].Seq || web[i].Seq != log[i].Seq || web[i].ID == am[i].ID || am[i].ID == log[i].ID {
			t.Fatalf("record %d: items %+v %+v %+v", i, web[i], am[i], log[i])
		}
	}
	for _, it := range web {
		if err := s.OutboxDone(ctx, it.ID); err != nil {
			t.Fatal(err)
		}
	}
	if err := s.OutboxRetry(ctx, am[0].ID, 1, t0.Add(time.Hour), "connection refused"); err != nil {
		t.Fatal(err)
	}
	counts := map[string]int{}
	for _, n := range notifierNames {
		counts[n], _ = s.OutboxLen(n)
	}
	if want := map[string]int{"webhook": 0, "alertmanager": 5, "log": 5}; !reflect.DeepEqual(counts, want) {
		t.Fatalf("queue lengths %v, want %v", counts, want)
	}
	if got := outboxAll(t, s, "log"); !reflect.DeepEqual(got, log) {
		t.Fatal("the log queue changed")
	}
	if due, _ := s.OutboxDue("alertmanager", t0, 10); len(due) != 4 || due[0].ID != am[1].ID {
		t.Fatalf("alertmanager due: %v", itemIDs(due))
	}
}
