package store

import (
	"bytes"
	"context"
	"crypto/sha256"
	"errors"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// siteConfig stands for a configuration file of the demo site.
const siteConfig = "site: Veldmark Photonics, building C\nzones: [coating-hood, assembly, metrology, gowning]\n"

func configLoadEntry() AuditEntry {
	sum := sha256.Sum256([]byte(siteConfig))
	return AuditEntry{
		Time: t0, Actor: "facilities-admin", Action: AuditConfigLoad,
		Subject: "/etc/cleanmon/veldmark-c.yaml", Reason: "daemon start", Detail: sum[:],
	}
}

func auditAll(t testing.TB, s *Store) []AuditEntry {
	t.Helper()
	var out []AuditEntry
	if err := s.ScanAudit(0, 0, func(e AuditEntry) error {
		out = append(out, e)
		return nil
	}); err != nil {
		t.Fatalf("ScanAudit: %v", err)
	}
	return out
}

// checkLinks recomputes the chain from outside, with AuditEntry.Link only.
func checkLinks(t testing.TB, es []AuditEntry) {
	t.Helper()
	var prev [32]byte
	for i, e := range es {
		if e.Seq != uint64(i+1) {
			t.Fatalf("entry %d numbered #%d", i, e.Seq)
		}
		if e.Link(prev) != e.Hash {
			t.Fatalf("entry #%d does not link to the one before", e.Seq)
		}
		prev = e.Hash
	}
}

func actions(es []AuditEntry) []string {
	var out []string
	for _, e := range es {
		out = append(out, e.Action)
	}
	return out
}

func TestAppendAudit(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{})
	ctx := context.Background()
	first := auditAll(t, s)
	if len(first) != 1 || first[0].Action != AuditChainStart || first[0].Actor != AuditActorSystem {
		t.Fatalf("a new store's chain: %+v", first)
	}
	entries := []AuditEntry{
		{Time: t0, Actor: AuditActorSystem, Action: AuditStart, Reason: "service start"},
		configLoadEntry(),
		{Time: t0.Add(time.Hour), Actor: "qa-lead", Action: "report-issued", Subject: "assembly", Reason: "quarterly classification"},
	}
	var heads [][32]byte
	for i, e := range entries {
		seq, head, err := s.AppendAudit(ctx, e)
		if err != nil {
			t.Fatal(err)
		}
		if seq != uint64(i+2) {
			t.Fatalf("entry %d numbered #%d, want #%d", i, seq, i+2)
		}
		if hs, hh, err := s.AuditHead(); err != nil || hs != seq || hh != head {
			t.Fatalf("AuditHead = #%d %x %v, AppendAudit said #%d %x", hs, hh, err, seq, head)
		}
		heads = append(heads, head)
	}
	got := auditAll(t, s)
	checkLinks(t, got)
	for i, e := range entries {
		g := got[i+1]
		if !g.Time.Equal(e.Time) || g.Actor != e.Actor || g.Action != e.Action || g.Subject != e.Subject || g.Reason != e.Reason || !bytes.Equal(g.Detail, e.Detail) || g.Hash != heads[i] {
			t.Fatalf("entry #%d read back as %+v, written %+v", g.Seq, g, e)
		}
	}
	// A range, and a zero Time taken as now.
	var mid []uint64
	if err := s.ScanAudit(2, 3, func(e AuditEntry) error { mid = append(mid, e.Seq); return nil }); err != nil || !reflect.DeepEqual(mid, []uint64{2, 3}) {
		t.Fatalf("ScanAudit(2, 3) = %v %v", mid, err)
	}
	wantErr(t, s.ScanAudit(3, 2, func(AuditEntry) error { return nil }), ErrInvalid)
	before := time.Now()
	seq, _, err := s.AppendAudit(ctx, AuditEntry{Actor: AuditActorSystem, Action: AuditStop})
	if err != nil {
		t.Fatal(err)
	}
	var stop AuditEntry
	_ = s.ScanAudit(seq, seq, func(e AuditEntry) error { stop = e; return nil })
	if stop.Time.Before(before.Add(-time.Second)) || stop.Time.After(time.Now().Add(time.Second)) {
		t.Fatalf("zero Time stored as %s", stop.Time)
	}
	hs, hh, _ := s.AuditHead()
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	s = openTest(t, dir, Options{})
	if rs, rh, err := s.AuditHead(); err != nil || rs != hs || rh != hh {
		t.Fatalf("head after reopen #%d %x %v, before #%d %x", rs, rh, err, hs, hh)
	}
}

func TestAppendAuditBadInput(t *testing.T) {
	cases := []struct {
		name   string
		change func(e *AuditEntry)
		field  string
	}{
		{"no actor", func(e *AuditEntry) { e.Actor = "" }, "Actor"},
		{"actor not UTF-8", func(e *AuditEntry) { e.Actor = "op\xfe" }, "Actor"},
		{"no action", func(e *AuditEntry) { e.Action = "" }, "Action"},
		{"store's own action", func(e *AuditEntry) { e.Action = AuditReadings }, "Action"},
		{"chain start", func(e *AuditEntry) { e.Action = AuditChainStart }, "Action"},
		{"subject too long", func(e *AuditEntry) { e.Subject = strings.Repeat("s", maxReasonLen+1) }, "Subject"},
		{"reason too long", func(e *AuditEntry) { e.Reason = strings.Repeat("r", maxReasonLen+1) }, "Reason"},
		{"detail too large", func(e *AuditEntry) { e.Detail = make([]byte, maxPayloadLen+1) }, "Detail"},
		{"time before 1970", func(e *AuditEntry) { e.Time = time.Date(1969, 7, 20, 0, 0, 0, 0, time.UTC) }, "Time"},
	}
	s := quick(t)
	hs, hh, _ := s.AuditHead()
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			e := configLoadEntry()
			c.change(&e)
			_, _, err := s.AppendAudit(context.Background(), e)
			var re *RecordError
			if !errors.As(err, &re) || re.Kind != "audit entry" || re.Field != c.field || !errors.Is(err, ErrInvalid) {
				t.Fatalf("error %v, want an audit entry error on %s", err, c.field)
			}
			if gs, gh, _ := s.AuditHead(); gs != hs || gh != hh {
				t.Fatal("a rejected entry moved the chain head")
			}
		})
	}
}

// TestAuditOfStoreWrites: every write the store makes on its own account
// leaves its entry, with who and why where the call says.
func TestAuditOfStoreWrites(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	rs := series("pc-asm-1", t0, 10)
	appendOK(t, s, rs)
	rs2 := append(series("pc-asm-1", t0.Add(9*time.Minute), 2), series("pc-asm-2", t0, 3)...)
	if acc, dup := appendOK(t, s, rs2); acc != 4 || dup != 1 {
		t.Fatalf("accepted %d duplicates %d", acc, dup)
	}
	appendOK(t, s, rs[:3]) // all duplicates: no entry
	if _, _, err := s.AppendPressure(ctx, []Pressure{{Sensor: "dp-asm-gown", Time: t0, Pa: 9.5}}); err != nil {
		t.Fatal(err)
	}
	if err := s.SetOperatingState(ctx, OperatingState{Zone: "assembly", State: StateMaintenance, By: "shift-lead", Reason: "filter change", Time: t0}); err != nil {
		t.Fatal(err)
	}
	ack := alarmRec("a-1", t0.Add(time.Minute), "acknowledged")
	ack.By, ack.Reason = "shift-lead", "door left open, closed"
	recordOK(t, s, []AlarmRecord{alarmRec("a-1", t0, "active"), ack}, notifierNames[:1])
	if _, err := s.Sweep(ctx, t0.Add(2*time.Minute)); err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if _, err := s.Backup(&buf); err != nil {
		t.Fatal(err)
	}
	backupPath := filepath.Join(t.TempDir(), FileName)
	if _, err := s.BackupFile(backupPath); err != nil {
		t.Fatal(err)
	}
	got := auditAll(t, s)
	checkLinks(t, got)
	want := []struct{ action, actor, subject, reason string }{
		{AuditChainStart, AuditActorSystem, "", "audit chain started"},
		{AuditReadings, AuditActorSystem, "pc-asm-1", "ingest: 10 readings"},
		{AuditReadings, AuditActorSystem, "pc-asm-1 and 1 more", "ingest: 4 readings"},
		{AuditPressure, AuditActorSystem, "dp-asm-gown", "ingest: 1 pressure samples"},
		{AuditOpState, "shift-lead", "assembly: maintenance", "filter change"},
		{AuditAlarm, AuditActorSystem, "a-1", ""},
		{AuditAlarm, "shift-lead", "a-1", "door left open, closed"},
		// Before 10:02: pc-asm-1 and pc-asm-2 at 10:00 and 10:01, and
		// their four minute rollups; the pressure sample at 10:00.
		{AuditSweep, AuditActorSystem, "before 2026-03-02T10:02:00Z", "retention: 4 readings, 1 pressure samples, 0 rollups, 0 cleared alarms deleted"},
		{AuditBackup, AuditActorSystem, "stream", ""},
		{AuditBackup, AuditActorSystem, backupPath, ""},
	}
	if len(got) != len(want) {
		t.Fatalf("actions %v", actions(got))
	}
	for i, w := range want {
		g := got[i]
		if g.Action != w.action || g.Actor != w.actor || g.Subject != w.subject || (w.reason != "" && g.Reason != w.reason) {
			t.Errorf("entry #%d: %s by %s on %q, %q; want %s by %s on %q, %q", g.Seq, g.Action, g.Actor, g.Subject, g.Reason, w.action, w.actor, w.subject, w.reason)
		}
	}
	// The first backup's copy holds the chain up to the entry before its
	// own, and says so.
	if !strings.Contains(got[8].Reason, "to entry #8") {
		t.Fatalf("backup entry reason %q", got[8].Reason)
	}
	// The batch entry names exactly the readings it stored, per counter in
	// the order stored.
	cv, err := decodeCoverage(got[2].Detail)
	if err != nil {
		t.Fatal(err)
	}
	var keys []string
	for _, r := range cv.recs {
		keys = append(keys, cv.names[r.name]+" "+nsTime(r.key).Format("15:04"))
	}
	if w := []string{"pc-asm-1 10:10", "pc-asm-2 10:00", "pc-asm-2 10:01", "pc-asm-2 10:02"}; !reflect.DeepEqual(keys, w) {
		t.Fatalf("batch covers %v, want %v", keys, w)
	}
}

// TestAuditAtomicWithData: a failed write leaves no audit entry, and a
// member that fails in a group takes only its own entry with it.
func TestAuditAtomicWithData(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true})
	recordOK(t, s, []AlarmRecord{alarmRec("a-0", t0, "active")}, notifierNames[:1])
	path := s.Path()
	_ = s.Close()
	rawUpdate(t, path, func(tx *bolt.Tx) error { return tx.Bucket(bucketOutbox).Put([]byte("log"), []byte("x")) })
	s = openTest(t, dir, Options{NoSync: true, MaxBytes: 2 << 20})
	hs, hh, _ := s.AuditHead()
	if _, err := s.RecordAlarms(context.Background(), []AlarmRecord{alarmRec("a-1", t0, "active")}, []string{"webhook", "log"}); err == nil {
		t.Fatal("RecordAlarms into a blocked queue succeeded")
	}
	big := series("pc-asm-1", t0, 40000) // far more than 2 MiB
	if _, _, err := s.AppendReadings(context.Background(), big); !errors.Is(err, ErrDiskFull) {
		t.Fatalf("oversized append: %v, want ErrDiskFull", err)
	}
	if gs, gh, _ := s.AuditHead(); gs != hs || gh != hh {
		t.Fatalf("failed calls moved the chain head from #%d to #%d", hs, gs)
	}
	appendOK(t, s, series("pc-asm-1", t0, 5))
	if gs, _, _ := s.AuditHead(); gs != hs+1 {
		t.Fatalf("head #%d after one good append, want #%d", gs, hs+1)
	}
}

// tamper cases run on the verify fixture; each names the problem Verify
// must report.
func TestVerifyAuditTampering(t *testing.T) {
	lastAudit := func(tx *bolt.Tx) ([]byte, AuditEntry) {
		k, v := tx.Bucket(bucketAudit).Cursor().Last()
		e, err := decodeAudit(k, v)
		if err != nil {
			panic(err)
		}
		return append([]byte(nil), k...), e
	}
	cases := []struct {
		name   string
		change func(tx *bolt.Tx) error
		want   string
	}{
		{"audit entry edited, checksum redone", func(tx *bolt.Tx) error {
			k, e := lastAudit(tx)
			e.Reason = "routine"
			return tx.Bucket(bucketAudit).Put(k, resealAudit(k, &e, e.Hash))
		}, `audit chain: first broken link at entry #12 (2026-03-02T10:00:00Z): its hash does not match its content`},
		{"audit entry removed", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketAudit).Delete(seqKey(5))
		}, `audit chain: first broken link at entry #5: entries #5 to #5 are missing`},
		{"last audit entry removed", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketAudit).Delete(seqKey(12))
		}, `audit chain: first broken link at entry #12: the chain ends at entry #11, but 12 were issued`},
		{"reading edited, checksum redone", func(tx *bolt.Tx) error {
			b := headOf(tx, "pc-asm-1")
			k := timeKey(t0.Add(42 * time.Minute))
			r, err := decodeReading("pc-asm-1", k, b.Get(k))
			if err != nil {
				return err
			}
			r.Counts[1] /= 2
			return b.Put(k, encodeReading(k, &r))
		}, `: the records it covers (300) were changed after they were stored`},
		{"reading removed", func(tx *bolt.Tx) error {
			return headOf(tx, "pc-met").Delete(timeKey(t0.Add(7 * time.Minute)))
		}, `reading of counter "pc-met" at 2026-03-02T10:07:00Z is missing`},
		{"reading added outside the store", func(tx *bolt.Tx) error {
			r := reading("pc-met", t0.Add(-time.Hour), 50)
			k := timeKey(r.Time)
			return headOf(tx, "pc-met").Put(k, encodeReading(k, &r))
		}, `1 of 51 records in the readings of counter "pc-met" are not covered by the audit chain`},
		{"pressure edited, checksum redone", func(tx *bolt.Tx) error {
			k := timeKey(t0)
			p := Pressure{Sensor: "dp-asm-gown", Time: t0, Pa: 15}
			return tx.Bucket(bucketPressure).Bucket([]byte("dp-asm-gown")).Put(k, encodePressure(k, &p))
		}, `: the records it covers (2) were changed after they were stored`},
		{"operating state edited, checksum redone", func(tx *bolt.Tx) error {
			k := nanosKey(1)
			st := OperatingState{Zone: "assembly", State: StateAtRest, By: "op", Reason: "shift", Time: t0}
			return tx.Bucket(bucketOpState).Bucket([]byte("assembly")).Put(k, encodeOpState(k, &st))
		}, `(operating-state, 2026-03-02T10:00:00Z): the records it covers (1) were changed`},
		{"journal entry edited, checksum redone", func(tx *bolt.Tx) error {
			k := seqKey(4)
			e, err := decodeJournal(k, tx.Bucket(bucketJournal).Get(k))
			if err != nil {
				return err
			}
			e.entry = []byte(`{"to":"cleared"}`)
			return tx.Bucket(bucketJournal).Put(k, encodeJournal(k, &e))
		}, `(alarm-transition, 2026-03-02T10:02:00Z): the records it covers (1) were changed`},
		{"sweep horizon set behind the chain's back", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketMeta).Put(metaSweptBefore, timeKey(t0.Add(time.Hour)))
		}, `the sweep horizon 2026-03-02T11:00:00Z is not the latest one in the audit chain`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := verifyFixture(t)
			rawUpdate(t, path, c.change)
			problems, err := Verify(path)
			if err != nil {
				t.Fatal(err)
			}
			found := false
			for _, p := range problems {
				found = found || strings.Contains(p, c.want)
			}
			if !found {
				t.Fatalf("problems %q, want one containing %q", problems, c.want)
			}
		})
	}
}

// resealAudit re-encodes an entry with the hash given, as someone editing
// the file with the store's own code would.
func resealAudit(key []byte, e *AuditEntry, hash [32]byte) []byte {
	v := append([]byte{codecV1}, hash[:]...)
	return seal(key, append(v, e.body()...))
}

func TestVerifyAuditFlippedByte(t *testing.T) {
	path := verifyFixture(t)
	flipValue(t, path, rawValue(t, path, [][]byte{bucketAudit}, seqKey(12)))
	problems, err := Verify(path)
	if err != nil {
		t.Fatal(err)
	}
	want := `audit chain: first broken link at entry #12: audit entry #12: checksum mismatch`
	if len(problems) != 1 || !strings.HasPrefix(problems[0], want) {
		t.Fatalf("problems %q, want one starting %q", problems, want)
	}
}

// TestAuditHeadDetectsRewrite: someone edits an entry and recomputes every
// hash after it. The chain is whole again, so Verify alone cannot tell;
// the head handed out before the edit no longer matches.
func TestAuditHeadDetectsRewrite(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true})
	appendOK(t, s, series("pc-asm-1", t0, 10))
	if _, _, err := s.AppendAudit(context.Background(), configLoadEntry()); err != nil {
		t.Fatal(err)
	}
	heldSeq, heldHash, err := s.AuditHead()
	if err != nil {
		t.Fatal(err)
	}
	path := s.Path()
	_ = s.Close()
	rawUpdate(t, path, func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketAudit)
		var prev [32]byte
		c := b.Cursor()
		var rewritten [][2][]byte
		for k, v := c.First(); k != nil; k, v = c.Next() {
			e, err := decodeAudit(k, v)
			if err != nil {
				return err
			}
			if e.Action == AuditConfigLoad {
				e.Subject = "/etc/cleanmon/other.yaml"
			}
			e.Hash = e.Link(prev)
			prev = e.Hash
			rewritten = append(rewritten, [2][]byte{append([]byte(nil), k...), resealAudit(k, &e, e.Hash)})
		}
		for _, kv := range rewritten {
			if err := b.Put(kv[0], kv[1]); err != nil {
				return err
			}
		}
		return nil
	})
	if problems, err := Verify(path); err != nil || len(problems) != 0 {
		t.Fatalf("a consistently rewritten chain: %q %v", problems, err)
	}
	s = openTest(t, dir, Options{NoSync: true})
	var now AuditEntry
	if err := s.ScanAudit(heldSeq, heldSeq, func(e AuditEntry) error { now = e; return nil }); err != nil {
		t.Fatal(err)
	}
	if now.Seq != heldSeq || now.Hash == heldHash {
		t.Fatalf("entry #%d hash %x: the held head %x should no longer match", now.Seq, now.Hash, heldHash)
	}
}

// TestChainStartOnOlderFile: a file written before the chain existed
// gets a chain start that accounts for what it held, and verifies clean.
func TestChainStartOnOlderFile(t *testing.T) {
	dir := t.TempDir()
	// An older file has no chunks: it predates them as well as the chain.
	s := openTest(t, dir, Options{NoSync: true, keepHead: true})
	appendOK(t, s, series("pc-asm-1", t0, 30))
	if err := s.SetOperatingState(context.Background(), OperatingState{Zone: "gowning", State: StateAtRest, Time: t0}); err != nil {
		t.Fatal(err)
	}
	recordOK(t, s, []AlarmRecord{alarmRec("a-1", t0, "active")}, nil)
	path := s.Path()
	_ = s.Close()
	// Make it an older file: no audit bucket at all, and the head one
	// value per reading.
	rawUpdate(t, path, func(tx *bolt.Tx) error {
		if err := logToLegacy(tx); err != nil {
			return err
		}
		return tx.DeleteBucket(bucketAudit)
	})
	s = openTest(t, dir, Options{NoSync: true})
	es := auditAll(t, s)
	if len(es) != 1 || es[0].Action != AuditChainStart {
		t.Fatalf("chain on an older file: %v", actions(es))
	}
	base, _, err := decodeChainStart(es[0].Detail)
	if err != nil || len(base) != 3 {
		t.Fatalf("chain start detail %+v %v", base, err)
	}
	// Late readings for times the file already held are covered as usual.
	appendOK(t, s, series("pc-asm-1", t0.Add(-5*time.Minute), 5))
	_ = s.Close()
	if problems, err := Verify(path); err != nil || len(problems) != 0 {
		t.Fatalf("Verify: %q %v", problems, err)
	}
}
