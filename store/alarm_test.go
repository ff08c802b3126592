package store

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// notifierNames are the notifier kinds of the README.
var notifierNames = []string{"webhook", "alertmanager", "log"}

// alarmRec is a transition of alarm id to state to at time at, with a
// snapshot and an entry shaped like the engine's JSON; the entry is
// unique per alarm, state and time.
func alarmRec(id string, at time.Time, to string) AlarmRecord {
	stamp := at.Format(time.RFC3339Nano)
	return AlarmRecord{
		AlarmID:  id,
		Time:     at,
		Cleared:  to == "cleared",
		Snapshot: fmt.Appendf(nil, `{"id":%q,"zone":"assembly","kind":"excursion","level":"alert","state":%q,"updated":%q}`, id, to, stamp),
		Entry:    fmt.Appendf(nil, `{"key":"%s/%s/%s","alarm_id":%q,"to":%q}`, id, to, stamp, id, to),
	}
}

func recordOK(t testing.TB, s *Store, recs []AlarmRecord, notifiers []string) []uint64 {
	t.Helper()
	seqs, err := s.RecordAlarms(context.Background(), recs, notifiers)
	if err != nil {
		t.Fatalf("RecordAlarms(%d records): %v", len(recs), err)
	}
	if len(seqs) != len(recs) {
		t.Fatalf("RecordAlarms returned %d sequence numbers for %d records", len(seqs), len(recs))
	}
	return seqs
}

type journalRow struct {
	Seq   uint64
	Time  time.Time
	Alarm string
	Entry string
}

func journalAll(t testing.TB, s *Store, from, to time.Time) []journalRow {
	t.Helper()
	var out []journalRow
	if err := s.ScanAlarmJournal(from, to, func(seq uint64, at time.Time, id string, entry []byte) error {
		out = append(out, journalRow{seq, at, id, string(entry)})
		return nil
	}); err != nil {
		t.Fatalf("ScanAlarmJournal: %v", err)
	}
	return out
}

func openAll(t testing.TB, s *Store) map[string]string {
	t.Helper()
	out := map[string]string{}
	if err := s.OpenAlarms(func(id string, snap []byte) error {
		out[id] = string(snap)
		return nil
	}); err != nil {
		t.Fatalf("OpenAlarms: %v", err)
	}
	return out
}

type alarmRow struct {
	ID      string
	Updated time.Time
	Cleared bool
	Snap    string
}

func alarmsSince(t testing.TB, s *Store, since time.Time) []alarmRow {
	t.Helper()
	var out []alarmRow
	if err := s.ScanAlarms(since, func(id string, updated time.Time, snap []byte, cleared bool) error {
		out = append(out, alarmRow{id, updated, cleared, string(snap)})
		return nil
	}); err != nil {
		t.Fatalf("ScanAlarms: %v", err)
	}
	return out
}

func outboxAll(t testing.TB, s *Store, notifier string) []OutboxItem {
	t.Helper()
	items, err := s.OutboxDue(notifier, maxTime.Add(-1), 1<<30)
	if err != nil {
		t.Fatalf("OutboxDue(%q): %v", notifier, err)
	}
	return items
}

// alarmStory is three alarms: a-1 raised and cleared, a-2 raised and
// acknowledged, a-3 raised; the records are given in four calls.
func alarmStory() [][]AlarmRecord {
	return [][]AlarmRecord{
		{alarmRec("a-1", t0, "pending"), alarmRec("a-2", t0.Add(time.Second), "active")},
		{alarmRec("a-1", t0.Add(time.Minute), "active")},
		{alarmRec("a-2", t0.Add(2*time.Minute), "acknowledged"), alarmRec("a-1", t0.Add(3*time.Minute), "cleared")},
		{alarmRec("a-3", t0.Add(4*time.Minute), "active")},
	}
}

func TestRecordAlarms(t *testing.T) {
	s := quick(t)
	var all []AlarmRecord
	var seqs []uint64
	for _, call := range alarmStory() {
		seqs = append(seqs, recordOK(t, s, call, notifierNames)...)
		all = append(all, call...)
	}
	for i, seq := range seqs {
		if seq != uint64(i+1) {
			t.Fatalf("sequence numbers %v, want 1…%d", seqs, len(all))
		}
	}
	var want []journalRow
	for i, r := range all {
		want = append(want, journalRow{uint64(i + 1), r.Time, r.AlarmID, string(r.Entry)})
	}
	if got := journalAll(t, s, time.Time{}, time.Time{}); !reflect.DeepEqual(got, want) {
		t.Fatalf("journal\n got %v\nwant %v", got, want)
	}
	// [t0+1m, t0+3m): the second and third records of the story.
	if got := journalAll(t, s, t0.Add(time.Minute), t0.Add(3*time.Minute)); !reflect.DeepEqual(got, want[2:4]) {
		t.Fatalf("journal range\n got %v\nwant %v", got, want[2:4])
	}
	open := openAll(t, s)
	wantOpen := map[string]string{"a-2": string(all[3].Snapshot), "a-3": string(all[5].Snapshot)}
	if !reflect.DeepEqual(open, wantOpen) {
		t.Fatalf("open alarms %v, want %v", open, wantOpen)
	}
	// Newest first, cleared ones too.
	wantAll := []alarmRow{
		{"a-3", all[5].Time, false, string(all[5].Snapshot)},
		{"a-1", all[4].Time, true, string(all[4].Snapshot)},
		{"a-2", all[3].Time, false, string(all[3].Snapshot)},
	}
	if got := alarmsSince(t, s, time.Time{}); !reflect.DeepEqual(got, wantAll) {
		t.Fatalf("ScanAlarms\n got %v\nwant %v", got, wantAll)
	}
	if got := alarmsSince(t, s, t0.Add(3*time.Minute)); !reflect.DeepEqual(got, wantAll[:2]) {
		t.Fatalf("ScanAlarms since t0+3m\n got %v\nwant %v", got, wantAll[:2])
	}
	// One outbox item per record and notifier, in record order, with the
	// record's entry as payload.
	ids := map[uint64]bool{}
	for _, n := range notifierNames {
		items := outboxAll(t, s, n)
		if len(items) != len(all) {
			t.Fatalf("%s: %d outbox items, want %d", n, len(items), len(all))
		}
		for i, it := range items {
			if it.Notifier != n || it.Seq != uint64(i+1) || !bytes.Equal(it.Payload, all[i].Entry) || it.Attempts != 0 || !it.NextAttempt.IsZero() || it.Created.IsZero() {
				t.Fatalf("%s item %d: %+v", n, i, it)
			}
			if ids[it.ID] {
				t.Fatalf("outbox ID %d given twice", it.ID)
			}
			ids[it.ID] = true
		}
		if got, err := s.OutboxLen(n); err != nil || got != len(all) {
			t.Fatalf("OutboxLen(%s) = %d, %v", n, got, err)
		}
	}
	// No notifiers: journaled, nothing queued.
	recordOK(t, s, []AlarmRecord{alarmRec("a-3", t0.Add(5*time.Minute), "acknowledged")}, nil)
	if n, _ := s.OutboxLen("webhook"); n != len(all) {
		t.Fatalf("a call without notifiers queued items: %d", n)
	}
	if got := journalAll(t, s, time.Time{}, time.Time{}); len(got) != len(all)+1 {
		t.Fatalf("%d journal entries, want %d", len(got), len(all)+1)
	}
}

// TestAlarmJournalTimeSteppedBack: the journal keeps sequence order even
// when a later record carries an earlier time; scans by time follow time.
func TestAlarmJournalTimeSteppedBack(t *testing.T) {
	s := quick(t)
	late, early := alarmRec("a-1", t0.Add(time.Hour), "active"), alarmRec("a-2", t0, "active")
	recordOK(t, s, []AlarmRecord{late}, notifierNames[:1])
	recordOK(t, s, []AlarmRecord{early}, notifierNames[:1])
	got := journalAll(t, s, time.Time{}, time.Time{})
	want := []journalRow{{2, early.Time, "a-2", string(early.Entry)}, {1, late.Time, "a-1", string(late.Entry)}}
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("journal by time\n got %v\nwant %v", got, want)
	}
	if items := outboxAll(t, s, "webhook"); len(items) != 2 || items[0].Seq != 1 {
		t.Fatalf("outbox not in creation order: %+v", items)
	}
}

// alarmTrace reports everything the alarm side of a store holds, to show
// that a failed call left nothing.
func alarmTrace(t *testing.T, s *Store) string {
	t.Helper()
	var b strings.Builder
	_ = s.db.View(func(tx *bolt.Tx) error {
		for _, name := range [][]byte{bucketJournal, bucketJournalAt, bucketAlarms, bucketAlarmsAt} {
			fmt.Fprintf(&b, "%s: %d keys, sequence %d; ", name, tx.Bucket(name).Stats().KeyN, tx.Bucket(name).Sequence())
		}
		ob := tx.Bucket(bucketOutbox)
		fmt.Fprintf(&b, "outbox sequence %d", ob.Sequence())
		_ = ob.ForEach(func(k, v []byte) error {
			n := -1
			if v == nil {
				n = ob.Bucket(k).Stats().KeyN
			}
			fmt.Fprintf(&b, ", %s: %d", k, n)
			return nil
		})
		return nil
	})
	return b.String()
}

func TestRecordAlarmsBadInput(t *testing.T) {
	good := func(i int) AlarmRecord {
		return alarmRec(fmt.Sprint("a-", i), t0.Add(time.Duration(i)*time.Second), "active")
	}
	cases := []struct {
		name      string
		change    func(rs []AlarmRecord) []AlarmRecord
		notifiers []string
		kind      string
		index     int
		field     string
	}{
		{"empty alarm ID", func(rs []AlarmRecord) []AlarmRecord { rs[1].AlarmID = ""; return rs }, notifierNames, "alarm record", 1, "AlarmID"},
		{"alarm ID not UTF-8", func(rs []AlarmRecord) []AlarmRecord { rs[2].AlarmID = "a\xff"; return rs }, notifierNames, "alarm record", 2, "AlarmID"},
		{"alarm ID too long", func(rs []AlarmRecord) []AlarmRecord { rs[0].AlarmID = strings.Repeat("x", maxNameLen+1); return rs }, notifierNames, "alarm record", 0, "AlarmID"},
		{"zero time", func(rs []AlarmRecord) []AlarmRecord { rs[2].Time = time.Time{}; return rs }, notifierNames, "alarm record", 2, "Time"},
		{"time before 1970", func(rs []AlarmRecord) []AlarmRecord {
			rs[1].Time = time.Date(1969, 12, 31, 0, 0, 0, 0, time.UTC)
			return rs
		}, notifierNames, "alarm record", 1, "Time"},
		{"empty snapshot", func(rs []AlarmRecord) []AlarmRecord { rs[1].Snapshot = nil; return rs }, notifierNames, "alarm record", 1, "Snapshot"},
		{"empty entry", func(rs []AlarmRecord) []AlarmRecord { rs[2].Entry = []byte{}; return rs }, notifierNames, "alarm record", 2, "Entry"},
		{"entry too large", func(rs []AlarmRecord) []AlarmRecord { rs[0].Entry = make([]byte, maxPayloadLen+1); return rs }, notifierNames, "alarm record", 0, "Entry"},
		{"empty notifier", func(rs []AlarmRecord) []AlarmRecord { return rs }, []string{"webhook", ""}, "notifier", 1, "Name"},
		{"repeated notifier", func(rs []AlarmRecord) []AlarmRecord { return rs }, []string{"webhook", "log", "webhook"}, "notifier", 2, "Name"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s := quick(t)
			before := alarmTrace(t, s)
			recs := c.change([]AlarmRecord{good(0), good(1), good(2)})
			seqs, err := s.RecordAlarms(context.Background(), recs, c.notifiers)
			wantErr(t, err, ErrInvalid)
			var re *RecordError
			if !errors.As(err, &re) || re.Kind != c.kind || re.Index != c.index || re.Field != c.field {
				t.Fatalf("error %v, want a %s error at index %d field %s", err, c.kind, c.index, c.field)
			}
			if seqs != nil {
				t.Fatalf("sequence numbers %v returned with an error", seqs)
			}
			if after := alarmTrace(t, s); after != before {
				t.Fatalf("a rejected call changed the store:\n%s\n%s", before, after)
			}
		})
	}
}

// TestRecordAlarmsAtomic makes calls fail after they began writing and
// checks that none leaves a journal entry, a snapshot, an index entry or
// an outbox item behind, and that the sequence numbers do not move.
func TestRecordAlarmsAtomic(t *testing.T) {
	recs := []AlarmRecord{alarmRec("a-1", t0, "active"), alarmRec("a-2", t0.Add(time.Second), "active")}
	cases := []struct {
		name string
		opt  Options
		// prepare runs on the closed store file before the call.
		prepare   func(t *testing.T, path string)
		recs      func() []AlarmRecord
		notifiers []string
		want      error
	}{
		{
			name: "second notifier's queue blocked by a value",
			prepare: func(t *testing.T, path string) {
				rawUpdate(t, path, func(tx *bolt.Tx) error { return tx.Bucket(bucketOutbox).Put([]byte("alertmanager"), []byte("x")) })
			},
			recs:      func() []AlarmRecord { return recs },
			notifiers: notifierNames,
			want:      bolt.ErrIncompatibleValue,
		},
		{
			name: "disk full at commit",
			opt:  Options{MaxBytes: 2 << 20},
			recs: func() []AlarmRecord {
				big := append([]AlarmRecord(nil), recs...)
				for i := range big {
					big[i].Snapshot = bytes.Repeat([]byte("s"), 400<<10)
					big[i].Entry = bytes.Repeat([]byte("e"), 400<<10)
				}
				return big
			},
			notifiers: notifierNames,
			want:      ErrDiskFull,
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			s := openTest(t, dir, Options{NoSync: true})
			// One earlier call, which must survive untouched.
			recordOK(t, s, []AlarmRecord{alarmRec("a-0", t0.Add(-time.Hour), "active")}, notifierNames[:1])
			path := s.Path()
			if err := s.Close(); err != nil {
				t.Fatal(err)
			}
			if c.prepare != nil {
				c.prepare(t, path)
			}
			opt := c.opt
			opt.NoSync = true
			s = openTest(t, dir, opt)
			before := alarmTrace(t, s)
			_, err := s.RecordAlarms(context.Background(), c.recs(), c.notifiers)
			wantErr(t, err, c.want)
			if after := alarmTrace(t, s); after != before {
				t.Fatalf("a failed call left a trace:\n%s\n%s", before, after)
			}
			if got := journalAll(t, s, time.Time{}, time.Time{}); len(got) != 1 || got[0].Alarm != "a-0" {
				t.Fatalf("journal after the failed call: %v", got)
			}
			if open := openAll(t, s); len(open) != 1 {
				t.Fatalf("open alarms after the failed call: %v", open)
			}
			// The store still takes a call, numbered right after the
			// earlier one.
			if seqs := recordOK(t, s, recs[:1], notifierNames[:1]); seqs[0] != 2 {
				t.Fatalf("next call got sequence %d, want 2", seqs[0])
			}
		})
	}
}

func TestRecordAlarmsCanceledWhileQueued(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true})
	release := holdCommitter(s, 1)
	first := make(chan error, 1)
	go func() {
		_, _, err := s.AppendReadings(context.Background(), series("pc-asm-1", t0, 1))
		first <- err
	}()
	ctx, cancel := context.WithCancel(context.Background())
	second := make(chan error, 1)
	go func() {
		_, err := s.RecordAlarms(ctx, []AlarmRecord{alarmRec("a-1", t0, "active")}, notifierNames)
		second <- err
	}()
	for i := 0; i < 5000 && len(s.reqs) < 1; i++ {
		time.Sleep(time.Millisecond)
	}
	cancel()
	if err := <-second; !errors.Is(err, context.Canceled) {
		t.Fatalf("queued call canceled: %v", err)
	}
	release()
	if err := <-first; err != nil {
		t.Fatal(err)
	}
	if got := journalAll(t, s, time.Time{}, time.Time{}); len(got) != 0 {
		t.Fatalf("a withdrawn call was journaled: %v", got)
	}
	if n, _ := s.OutboxLen("webhook"); n != 0 {
		t.Fatalf("a withdrawn call queued %d items", n)
	}
}

func rawUpdate(t *testing.T, path string, fn func(tx *bolt.Tx) error) {
	t.Helper()
	db, err := bolt.Open(path, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if err := db.Update(fn); err != nil {
		t.Fatal(err)
	}
}

func TestAlarmsSurviveReopen(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{}) // real fsync
	for _, call := range alarmStory() {
		recordOK(t, s, call, notifierNames)
	}
	webhook := outboxAll(t, s, "webhook")
	if err := s.OutboxDone(context.Background(), webhook[0].ID); err != nil {
		t.Fatal(err)
	}
	next := t0.Add(time.Hour)
	if err := s.OutboxRetry(context.Background(), webhook[1].ID, 1, next, "503 Service Unavailable"); err != nil {
		t.Fatal(err)
	}
	wantJournal := journalAll(t, s, time.Time{}, time.Time{})
	wantOpen, wantAlarms := openAll(t, s), alarmsSince(t, s, time.Time{})
	wantOutbox := map[string][]OutboxItem{}
	for _, n := range notifierNames {
		wantOutbox[n] = outboxAll(t, s, n)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if problems, err := Verify(dir); err != nil || len(problems) != 0 {
		t.Fatalf("Verify: %q %v", problems, err)
	}
	s = openTest(t, dir, Options{})
	if got := journalAll(t, s, time.Time{}, time.Time{}); !reflect.DeepEqual(got, wantJournal) {
		t.Fatal("journal changed across reopen")
	}
	if got := openAll(t, s); !reflect.DeepEqual(got, wantOpen) {
		t.Fatal("open alarms changed across reopen")
	}
	if got := alarmsSince(t, s, time.Time{}); !reflect.DeepEqual(got, wantAlarms) {
		t.Fatal("alarm snapshots changed across reopen")
	}
	for _, n := range notifierNames {
		if got := outboxAll(t, s, n); !reflect.DeepEqual(got, wantOutbox[n]) {
			t.Fatalf("%s outbox changed across reopen:\n got %+v\nwant %+v", n, got, wantOutbox[n])
		}
	}
	if got := outboxAll(t, s, "webhook"); len(got) != 5 || got[0].Attempts != 1 || !got[0].NextAttempt.Equal(next) {
		t.Fatalf("webhook outbox after Done and Retry: %+v", got)
	}
	// Numbering carries on after a reopen.
	if seqs := recordOK(t, s, []AlarmRecord{alarmRec("a-3", t0.Add(time.Hour), "acknowledged")}, nil); seqs[0] != 7 {
		t.Fatalf("sequence after reopen %d, want 7", seqs[0])
	}
}

// TestKillKeepsAlarms runs RecordAlarms in a child process, kills it with
// SIGKILL mid-stream, and checks that every call it saw return is in the
// journal and the outbox.
func TestKillKeepsAlarms(t *testing.T) {
	if dir := os.Getenv("CLEANMON_STORE_ALARM_CHILD_DIR"); dir != "" {
		killAlarmChild(dir)
		return
	}
	dir := t.TempDir()
	cmd := exec.Command(os.Args[0], "-test.run=^TestKillKeepsAlarms$", "-test.count=1")
	cmd.Env = append(os.Environ(), "CLEANMON_STORE_ALARM_CHILD_DIR="+dir)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	acked := map[int][]uint64{}
	lines := bufio.NewScanner(out)
	deadline := time.AfterFunc(30*time.Second, func() { _ = cmd.Process.Kill() })
	for len(acked) < 30 && lines.Scan() {
		f := strings.Fields(lines.Text())
		if len(f) == 4 && f[0] == "ack" {
			i, _ := strconv.Atoi(f[1])
			a, _ := strconv.ParseUint(f[2], 10, 64)
			b, _ := strconv.ParseUint(f[3], 10, 64)
			acked[i] = []uint64{a, b}
		}
	}
	deadline.Stop()
	_ = cmd.Process.Kill()
	_ = cmd.Wait()
	if len(acked) < 30 {
		t.Fatalf("child acknowledged only %d calls", len(acked))
	}
	s := openTest(t, dir, Options{})
	journal := map[uint64]journalRow{}
	for _, r := range journalAll(t, s, time.Time{}, time.Time{}) {
		journal[r.Seq] = r
	}
	queued := map[string]map[uint64]bool{}
	for _, n := range notifierNames[:2] {
		queued[n] = map[uint64]bool{}
		for _, it := range outboxAll(t, s, n) {
			queued[n][it.Seq] = true
		}
	}
	for i, seqs := range acked {
		for j, seq := range seqs {
			want := killAlarmCall(i)[j]
			if r, ok := journal[seq]; !ok || r.Alarm != want.AlarmID || r.Entry != string(want.Entry) {
				t.Fatalf("call %d acknowledged, journal entry #%d is %+v", i, seq, r)
			}
			for _, n := range notifierNames[:2] {
				if !queued[n][seq] {
					t.Fatalf("call %d acknowledged, %s has no outbox item for #%d", i, n, seq)
				}
			}
		}
	}
	_ = s.Close()
	if problems, err := Verify(dir); err != nil || len(problems) != 0 {
		t.Fatalf("Verify after kill -9: %v %v", problems, err)
	}
}

func killAlarmCall(i int) []AlarmRecord {
	at := t0.Add(time.Duration(i) * time.Minute)
	id := fmt.Sprint("a-", i%7)
	return []AlarmRecord{alarmRec(id, at, "active"), alarmRec(id, at.Add(time.Second), "cleared")}
}

func killAlarmChild(dir string) {
	s, err := Open(dir, Options{})
	if err != nil {
		fmt.Println("open:", err)
		os.Exit(1)
	}
	for i := 0; i < 100000; i++ {
		seqs, err := s.RecordAlarms(context.Background(), killAlarmCall(i), notifierNames[:2])
		if err != nil {
			fmt.Println("record:", err)
			os.Exit(1)
		}
		fmt.Printf("ack %d %d %d\n", i, seqs[0], seqs[1])
	}
	os.Exit(0)
}

// TestAlarmsShareGroupCommit: a RecordAlarms call and AppendReadings calls
// waiting together go into one transaction.
func TestAlarmsShareGroupCommit(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{})
	const readers = 5
	release := holdCommitter(s, readers)
	var wg sync.WaitGroup
	for g := 0; g < readers; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if _, _, err := s.AppendReadings(context.Background(), series(fmt.Sprintf("pc-%d", g), t0, 5)); err != nil {
				t.Error(err)
			}
		}()
	}
	wg.Add(1)
	go func() {
		defer wg.Done()
		if _, err := s.RecordAlarms(context.Background(), []AlarmRecord{alarmRec("a-1", t0, "active")}, notifierNames); err != nil {
			t.Error(err)
		}
	}()
	time.Sleep(10 * time.Millisecond)
	release()
	wg.Wait()
	if n := s.commits.Load(); n != 1 {
		t.Fatalf("%d callers used %d transactions, want 1", readers+1, n)
	}
	if len(journalAll(t, s, time.Time{}, time.Time{})) != 1 || len(scanAll(t, s, "pc-0", time.Time{}, time.Time{})) != 5 {
		t.Fatal("the shared transaction lost a member's records")
	}
}

func TestAlarmsConcurrentWithReadings(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{}) // real fsync
	const writers, calls = 4, 30
	var wg sync.WaitGroup
	var seqs sync.Map
	var recorded atomic.Int64
	for g := 0; g < writers; g++ {
		wg.Add(2)
		go func() {
			defer wg.Done()
			for i := 0; i < calls; i++ {
				if _, _, err := s.AppendReadings(context.Background(), series(fmt.Sprintf("pc-%d", g), t0.Add(time.Duration(i*10)*time.Minute), 10)); err != nil {
					t.Error(err)
					return
				}
			}
		}()
		go func() {
			defer wg.Done()
			for i := 0; i < calls; i++ {
				id := fmt.Sprintf("a-%d-%d", g, i%3)
				got, err := s.RecordAlarms(context.Background(), []AlarmRecord{alarmRec(id, t0.Add(time.Duration(i)*time.Second), "active")}, notifierNames)
				if err != nil {
					t.Error(err)
					return
				}
				if _, dup := seqs.LoadOrStore(got[0], true); dup {
					t.Errorf("sequence %d given twice", got[0])
				}
				recorded.Add(1)
			}
		}()
	}
	wg.Wait()
	n := int(recorded.Load())
	if n != writers*calls {
		t.Fatalf("%d calls recorded", n)
	}
	if got := journalAll(t, s, time.Time{}, time.Time{}); len(got) != n {
		t.Fatalf("%d journal entries, want %d", len(got), n)
	}
	for _, nt := range notifierNames {
		if got, _ := s.OutboxLen(nt); got != n {
			t.Fatalf("%s: %d outbox items, want %d", nt, got, n)
		}
	}
	if got := len(openAll(t, s)); got != writers*3 {
		t.Fatalf("%d open alarms, want %d", got, writers*3)
	}
	for g := 0; g < writers; g++ {
		if got := len(scanAll(t, s, fmt.Sprintf("pc-%d", g), time.Time{}, time.Time{})); got != calls*10 {
			t.Fatalf("pc-%d: %d readings", g, got)
		}
	}
	t.Logf("%d calls in %d commit transactions", 2*writers*calls, s.commits.Load())
	if s.commits.Load() >= uint64(2*writers*calls) {
		t.Errorf("%d calls took %d transactions: no call shared one", 2*writers*calls, s.commits.Load())
	}
	_ = s.Close()
	if problems, err := Verify(dir); err != nil || len(problems) != 0 {
		t.Fatalf("Verify: %q %v", problems, err)
	}
}

func TestSweepClearedAlarms(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	// old-cleared: cleared 2 h before the cut → swept.
	// old-open: raised 2 h before the cut, still active → kept.
	// new-cleared: cleared after the cut → kept.
	// reopened: cleared before the cut, raised again after it → kept.
	cut := t0.Add(3 * time.Hour)
	recordOK(t, s, []AlarmRecord{
		alarmRec("old-cleared", t0, "active"),
		alarmRec("old-open", t0, "active"),
		alarmRec("old-cleared", t0.Add(time.Hour), "cleared"),
		alarmRec("reopened", t0.Add(time.Hour), "cleared"),
		alarmRec("new-cleared", t0.Add(2*time.Hour), "active"),
		alarmRec("new-cleared", cut, "cleared"),
		alarmRec("reopened", cut.Add(time.Minute), "active"),
	}, notifierNames[:1])
	res, err := s.Sweep(ctx, cut)
	if err != nil {
		t.Fatal(err)
	}
	if res.Alarms != 1 {
		t.Fatalf("swept %d alarm snapshots, want 1", res.Alarms)
	}
	var ids []string
	for _, a := range alarmsSince(t, s, time.Time{}) {
		ids = append(ids, a.ID)
	}
	if want := []string{"reopened", "new-cleared", "old-open"}; !reflect.DeepEqual(ids, want) {
		t.Fatalf("alarms after sweep %v, want %v", ids, want)
	}
	if got := journalAll(t, s, time.Time{}, time.Time{}); len(got) != 7 {
		t.Fatalf("sweep touched the journal: %d entries", len(got))
	}
	if n, _ := s.OutboxLen("webhook"); n != 7 {
		t.Fatalf("sweep touched the outbox: %d items", n)
	}
	// Sweeping everything still keeps open alarms, the journal and the outbox.
	if res, err = s.Sweep(ctx, t0.Add(24*time.Hour)); err != nil || res.Alarms != 1 {
		t.Fatalf("second sweep %+v %v", res, err)
	}
	if open := openAll(t, s); len(open) != 2 {
		t.Fatalf("open alarms after sweeping everything: %v", open)
	}
	path := s.Path()
	_ = s.Close()
	if problems, err := Verify(path); err != nil || len(problems) != 0 {
		t.Fatalf("Verify after sweep: %q %v", problems, err)
	}
}

// TestBackupHoldsWholeAlarmCalls takes a backup while calls of three
// records each are running: the copy holds whole calls only, each with
// all its outbox items.
func TestBackupHoldsWholeAlarmCalls(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true})
	const perCall = 3
	var stop atomic.Bool
	var calls atomic.Int64
	var wg sync.WaitGroup
	for g := 0; g < 3; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := 0; !stop.Load() && i < 5000; i++ {
				var recs []AlarmRecord
				for j := 0; j < perCall; j++ {
					recs = append(recs, alarmRec(fmt.Sprintf("a-%d-%d", g, j), t0.Add(time.Duration(i)*time.Second), "active"))
				}
				if _, err := s.RecordAlarms(context.Background(), recs, notifierNames[:2]); err != nil {
					t.Error(err)
					return
				}
				calls.Add(1)
			}
		}()
	}
	for calls.Load() < 30 {
		time.Sleep(time.Millisecond)
	}
	dir := t.TempDir()
	if _, err := s.BackupFile(filepath.Join(dir, FileName)); err != nil {
		t.Fatal(err)
	}
	stop.Store(true)
	wg.Wait()
	if problems, err := Verify(dir); err != nil || len(problems) != 0 {
		t.Fatalf("Verify(backup) = %q, %v", problems, err)
	}
	b := openTest(t, dir, Options{NoSync: true})
	journal := journalAll(t, b, time.Time{}, time.Time{})
	if len(journal) == 0 || len(journal)%perCall != 0 {
		t.Fatalf("%d journal entries in the backup, not whole calls of %d", len(journal), perCall)
	}
	for _, n := range notifierNames[:2] {
		if got, _ := b.OutboxLen(n); got != len(journal) {
			t.Fatalf("%s: %d outbox items for %d journal entries", n, got, len(journal))
		}
	}
}
