package store

import (
	"context"
	"crypto/ed25519"
	"errors"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// newSigner writes a key pair into dir (outside any data directory) and
// loads it.
func newSigner(t *testing.T) (*AuditSigner, ed25519.PublicKey) {
	t.Helper()
	dir := t.TempDir()
	if _, err := WriteAuditKeyFiles(filepath.Join(dir, "audit.key"), filepath.Join(dir, "audit.pub")); err != nil {
		t.Fatal(err)
	}
	s, err := LoadAuditSigner(filepath.Join(dir, "audit.key"))
	if err != nil {
		t.Fatal(err)
	}
	pub, err := LoadAuditPublicKey(filepath.Join(dir, "audit.pub"))
	if err != nil {
		t.Fatal(err)
	}
	return s, pub
}

func TestAuditKeyFiles(t *testing.T) {
	dir := t.TempDir()
	priv, pub := filepath.Join(dir, "k"), filepath.Join(dir, "k.pub")
	id, err := WriteAuditKeyFiles(priv, pub)
	if err != nil {
		t.Fatal(err)
	}
	if info, _ := os.Stat(priv); info.Mode().Perm() != 0o600 {
		t.Errorf("private key mode %v, want 0600", info.Mode().Perm())
	}
	if _, err := WriteAuditKeyFiles(priv, filepath.Join(dir, "other.pub")); !errors.Is(err, ErrKey) {
		t.Errorf("an existing key was overwritten: %v", err)
	}
	s, err := LoadAuditSigner(priv)
	if err != nil || s.KeyID() != id {
		t.Fatalf("LoadAuditSigner: %v, id %v want %s", err, s, id)
	}
	for _, p := range []string{priv, pub} {
		k, err := LoadAuditPublicKey(p)
		if err != nil || KeyID(k) != id {
			t.Errorf("LoadAuditPublicKey(%s): %v, id %s want %s", p, err, KeyID(k), id)
		}
	}
	if err := os.Chmod(priv, 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadAuditSigner(priv); !errors.Is(err, ErrKey) || !strings.Contains(err.Error(), "chmod 600") {
		t.Errorf("a world-readable key was accepted: %v", err)
	}
	if _, err := LoadAuditPublicKey(filepath.Join(dir, "none")); !errors.Is(err, ErrKey) {
		t.Errorf("missing file: %v", err)
	}
}

// buildSigned makes a store file with readings, pressure and daemon
// entries, signed with signer when it is not nil, and returns its file
// and a checkpoint of its head.
func buildSigned(t *testing.T, signer *AuditSigner) (string, Checkpoint) {
	t.Helper()
	dir := t.TempDir()
	s, err := Open(dir, Options{NoSync: true, CompactEvery: -1, keepHead: true}) // the tamper helpers edit readings in the head
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if signer != nil {
		if err := s.UseAuditKey(ctx, signer, ""); err != nil {
			t.Fatal(err)
		}
	}
	for i := range 4 {
		appendOK(t, s, series("pc-asm-1", t0.Add(time.Duration(i)*time.Hour), 20))
		if _, _, err := s.AppendAudit(ctx, AuditEntry{Actor: "qa.reviewer", Action: AuditConfigLoad, Subject: "site.yaml", Reason: "shift change"}); err != nil {
			t.Fatal(err)
		}
	}
	cp, err := s.Checkpoint()
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	return filepath.Join(dir, FileName), cp
}

// copyFile copies a closed store file into a new directory.
func copyFile(t *testing.T, src string) string {
	t.Helper()
	dst := filepath.Join(t.TempDir(), FileName)
	in, err := os.Open(src)
	if err != nil {
		t.Fatal(err)
	}
	defer in.Close()
	out, err := os.Create(dst)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := io.Copy(out, in); err != nil {
		t.Fatal(err)
	}
	if err := out.Close(); err != nil {
		t.Fatal(err)
	}
	return dst
}

// rechain is what someone with write access but without the key can do:
// edit the entries, then recompute every hash and checksum and the
// issued sequence, so that the chain is whole again. Signatures of
// entries beyond the new end are removed when dropSigs is set.
func rechain(t *testing.T, path string, dropSigs bool, edit func(tx *bolt.Tx, es []AuditEntry) []AuditEntry) {
	t.Helper()
	db, err := bolt.Open(path, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	err = db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketAudit)
		var es []AuditEntry
		c := b.Cursor()
		for k, v := c.First(); k != nil; k, v = c.Next() {
			e, err := decodeAudit(k, v)
			if err != nil {
				return err
			}
			es = append(es, e)
		}
		for _, e := range es {
			if err := b.Delete(seqKey(e.Seq)); err != nil {
				return err
			}
		}
		es = edit(tx, es)
		var prev [32]byte
		for i := range es {
			seq := uint64(i + 1)
			body := es[i].body()
			hash := auditLink(prev, seq, body)
			v := append(append([]byte{codecV1}, hash[:]...), body...)
			if err := b.Put(seqKey(seq), seal(seqKey(seq), v)); err != nil {
				return err
			}
			prev = hash
		}
		// The index by action follows the chain: one who rewrites the
		// chain with the code at hand rebuilds it too.
		if err := tx.DeleteBucket(bucketAuditIndex); err != nil {
			return err
		}
		if _, err := tx.CreateBucket(bucketAuditIndex); err != nil {
			return err
		}
		if err := buildAuditIndex(tx); err != nil {
			return err
		}
		if err := tx.DeleteBucket(bucketAuditHours); err != nil {
			return err
		}
		if _, err := tx.CreateBucket(bucketAuditHours); err != nil {
			return err
		}
		if err := buildAuditHours(tx); err != nil {
			return err
		}
		if err := b.SetSequence(uint64(len(es))); err != nil {
			return err
		}
		if dropSigs {
			sigs := tx.Bucket(bucketAuditSig)
			for k, _ := sigs.Cursor().Seek(seqKey(uint64(len(es) + 1))); k != nil; k, _ = sigs.Cursor().Seek(seqKey(uint64(len(es) + 1))) {
				if err := sigs.Delete(k); err != nil {
					return err
				}
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}

// rewriteReading changes one covered reading and recomputes the digest of
// the readings-batch entry that covers it.
func rewriteReading(tx *bolt.Tx, es []AuditEntry) []AuditEntry {
	for i := len(es) - 1; i >= 0; i-- {
		if es[i].Action != AuditReadings {
			continue
		}
		cv, err := decodeCoverage(es[i].Detail)
		if err != nil {
			panic(err)
		}
		cov := newCoverage(coverReadings)
		for j, r := range cv.recs {
			name := cv.names[r.name]
			key := seqKey(uint64(r.key))
			b := headOf(tx, name)
			val := b.Get(key)
			if j == 0 {
				rd, err := decodeReading(name, key, val)
				if err != nil {
					panic(err)
				}
				rd.Counts[0] /= 10 // a dirty minute made to look clean
				val = encodeReading(key, &rd)
				if err := b.Put(key, val); err != nil {
					panic(err)
				}
				rewriteRollups(tx, name, uint64(r.key))
			}
			cov.add(name, key, val)
		}
		es[i].Detail = cov.detail()
		return es
	}
	panic("no readings batch")
}

// rewriteRollups recomputes the rollups of the buckets a changed reading
// falls in, as a thorough forger would: the rollups are checked against
// the readings.
func rewriteRollups(tx *bolt.Tx, counter string, ns uint64) {
	for _, st := range rollupSteps {
		start := int64(ns) - int64(ns)%int64(st.step)
		acc := rebuildRollup(slog.New(slog.DiscardHandler), tx, counter, start, st.step)
		rb := tx.Bucket(st.bucket).Bucket([]byte(counter))
		if rb == nil {
			continue
		}
		if err := rb.Put(nanosKey(start), encodeRollup(nanosKey(start), acc)); err != nil {
			panic(err)
		}
	}
}

func hasProblem(problems []string, want string) bool {
	for _, p := range problems {
		if strings.Contains(p, want) {
			return true
		}
	}
	return false
}

// TestAuditTamper rewrites copies of a real signed store the way someone
// with write access to the data directory but without the key would, and
// checks what Verify finds without the key, with it, and with a kept
// checkpoint.
func TestAuditTamper(t *testing.T) {
	signer, pub := newSigner(t)
	orig, cp := buildSigned(t, signer)
	keys := []ed25519.PublicKey{pub}
	if p, err := VerifyWith(orig, VerifyOptions{Keys: keys, Head: &cp}); err != nil || len(p) > 0 {
		t.Fatalf("untouched store: %v %q", err, p)
	}
	if err := cp.CheckSignature(keys); err != nil {
		t.Fatalf("checkpoint: %v", err)
	}
	cases := []struct {
		name     string
		dropSigs bool
		edit     func(tx *bolt.Tx, es []AuditEntry) []AuditEntry
		plain    bool // plain Verify (no key) finds nothing: what the key is for
		keyed    string
		head     string
	}{
		{"rewrite a reason", false, func(_ *bolt.Tx, es []AuditEntry) []AuditEntry {
			es[len(es)-3].Reason = "nothing happened"
			return es
		}, true, "does not match", ""},
		{"rewrite a reading and its batch digest", false, rewriteReading, true, "does not match", ""},
		{"reorder two entries", false, func(_ *bolt.Tx, es []AuditEntry) []AuditEntry {
			n := len(es)
			es[n-2], es[n-3] = es[n-3], es[n-2]
			return es
		}, true, "does not match", ""},
		{"insert an entry", false, func(_ *bolt.Tx, es []AuditEntry) []AuditEntry {
			extra := AuditEntry{Time: es[3].Time, Actor: "qa.reviewer", Action: AuditConfigLoad, Reason: "approved"}
			return append(es[:4:4], append([]AuditEntry{extra}, es[4:]...)...)
		}, true, "does not match", ""},
		{"truncate the tail, signatures left", false, func(_ *bolt.Tx, es []AuditEntry) []AuditEntry {
			return es[:len(es)-1] // the newest entry, a configuration load
		}, true, "missing from the chain", "removed from its tail"},
		{"truncate the tail and its signatures", true, func(_ *bolt.Tx, es []AuditEntry) []AuditEntry {
			return es[:len(es)-1]
		}, true, "", "removed from its tail"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := copyFile(t, orig)
			rechain(t, path, c.dropSigs, c.edit)
			plain, err := Verify(path)
			if err != nil {
				t.Fatal(err)
			}
			if c.plain && len(plain) > 0 {
				t.Errorf("without the key Verify found %q; the chain was rewritten to pass", plain)
			}
			keyed, err := VerifyWith(path, VerifyOptions{Keys: keys})
			if err != nil {
				t.Fatal(err)
			}
			if c.keyed == "" && len(keyed) > 0 {
				t.Errorf("with the key: %q", keyed)
			}
			if c.keyed != "" && !hasProblem(keyed, c.keyed) {
				t.Errorf("with the key: %q, want a problem saying %q", keyed, c.keyed)
			}
			head, err := VerifyWith(path, VerifyOptions{Head: &cp})
			if err != nil {
				t.Fatal(err)
			}
			want := c.head
			if want == "" {
				want = "no longer has the hash" // every rewrite before the head changes its hash
			}
			if !hasProblem(head, want) {
				t.Errorf("with the checkpoint: %q, want %q", head, want)
			}
			// The daemon's own checks find it too when it starts with the key.
			s, err := Open(filepath.Dir(path), Options{NoSync: true})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Close()
			qerr := s.CheckQuick(context.Background(), CheckOptions{Keys: keys, Head: &cp})
			var ie *IntegrityError
			if !errors.As(qerr, &ie) || !errors.Is(qerr, ErrCorrupt) {
				t.Fatalf("CheckQuick: %v, want an integrity error", qerr)
			}
			if !strings.Contains(ie.Error(), "cleanmon verify "+path) {
				t.Errorf("the message does not name the verify command: %v", ie)
			}
		})
	}
}

// TestAuditUnsignedCheckpoint: without a key a kept checkpoint still
// finds a cut tail.
func TestAuditUnsignedCheckpoint(t *testing.T) {
	orig, cp := buildSigned(t, nil)
	if cp.KeyID != "" || cp.Sig != nil {
		t.Fatalf("checkpoint signed without a key: %+v", cp)
	}
	back, err := ParseCheckpoint(cp.String())
	if err != nil || back.Seq != cp.Seq || back.Hash != cp.Hash || !back.Time.Equal(cp.Time) {
		t.Fatalf("ParseCheckpoint(%q) = %+v, %v", cp.String(), back, err)
	}
	path := copyFile(t, orig)
	rechain(t, path, true, func(_ *bolt.Tx, es []AuditEntry) []AuditEntry { return es[:len(es)-1] })
	if p, _ := Verify(path); len(p) > 0 {
		t.Errorf("plain Verify found %q", p)
	}
	p, err := VerifyWith(path, VerifyOptions{Head: &back})
	if err != nil || !hasProblem(p, "removed from its tail") {
		t.Errorf("with the checkpoint: %q %v", p, err)
	}
}

func TestCheckpointText(t *testing.T) {
	signer, pub := newSigner(t)
	_, cp := buildSigned(t, signer)
	text := cp.String()
	back, err := ParseCheckpoint(text)
	if err != nil {
		t.Fatal(err)
	}
	if err := back.CheckSignature([]ed25519.PublicKey{pub}); err != nil {
		t.Fatalf("signature after a round trip: %v", err)
	}
	altered := strings.Replace(text, "seq=", "seq=1", 1)
	if c, err := ParseCheckpoint(altered); err != nil || c.CheckSignature([]ed25519.PublicKey{pub}) == nil {
		t.Errorf("an altered sequence number still verifies (%v)", err)
	}
	_, other := newSigner(t)
	if err := back.CheckSignature([]ed25519.PublicKey{other}); err == nil || !strings.Contains(err.Error(), "not given") {
		t.Errorf("unknown key: %v", err)
	}
	for _, bad := range []string{"", "cleanmon-audit-checkpoint/1 seq=1", text + " seq=2", text + " extra=1", strings.Replace(text, "hash=", "hash=zz", 1)} {
		if _, err := ParseCheckpoint(bad); !errors.Is(err, ErrCheckpoint) {
			t.Errorf("ParseCheckpoint(%q): %v", bad, err)
		}
	}
}

// TestAuditKeyRotation: a new key is recorded in the chain, and a verifier
// needs every key the chain was signed with.
func TestAuditKeyRotation(t *testing.T) {
	a, pubA := newSigner(t)
	b, pubB := newSigner(t)
	dir := t.TempDir()
	ctx := context.Background()
	at := t0
	for _, k := range []*AuditSigner{a, a, b} {
		s, err := Open(dir, Options{NoSync: true})
		if err != nil {
			t.Fatal(err)
		}
		if err := s.UseAuditKey(ctx, k, "it.admin"); err != nil {
			t.Fatal(err)
		}
		appendOK(t, s, series("pc-hood", at, 3))
		at = at.Add(time.Hour)
		if err := s.Close(); err != nil {
			t.Fatal(err)
		}
	}
	s := openTest(t, dir, Options{NoSync: true})
	var changes []AuditEntry
	if err := s.ScanAudit(1, 0, func(e AuditEntry) error {
		if e.Action == AuditKeyChange {
			changes = append(changes, e)
		}
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	if len(changes) != 2 || changes[0].Subject != a.KeyID() || changes[1].Subject != b.KeyID() ||
		!strings.Contains(changes[1].Reason, "rotated from "+a.KeyID()) || changes[1].Actor != "it.admin" {
		t.Fatalf("key changes %+v", changes)
	}
	_ = s.Close()
	path := filepath.Join(dir, FileName)
	p, err := VerifyWith(path, VerifyOptions{Keys: []ed25519.PublicKey{pubB}})
	if err != nil || !hasProblem(p, "signed by key "+a.KeyID()+", which was not given") {
		t.Errorf("only the new key: %q %v", p, err)
	}
	if p, err := VerifyWith(path, VerifyOptions{Keys: []ed25519.PublicKey{pubA, pubB}}); err != nil || len(p) > 0 {
		t.Errorf("both keys: %q %v", p, err)
	}
	if _, _, err := quick(t).AppendAudit(ctx, AuditEntry{Actor: "x", Action: AuditKeyChange}); !errors.Is(err, ErrInvalid) {
		t.Errorf("a key change through AppendAudit: %v", err)
	}
}

// FuzzParseCheckpoint: a checkpoint file comes from outside; whatever it
// holds, parsing refuses it or gives one that prints back to itself.
func FuzzParseCheckpoint(f *testing.F) {
	f.Add("cleanmon-audit-checkpoint/1 seq=12 hash=" + strings.Repeat("ab", 32) + " time=2026-03-02T10:00:00Z")
	f.Add("cleanmon-audit-checkpoint/1 seq=1 hash=" + strings.Repeat("00", 32) + " time=2026-03-02T10:00:00.5Z key=0011223344556677 sig=" + strings.Repeat("A", 86))
	f.Fuzz(func(t *testing.T, text string) {
		c, err := ParseCheckpoint(text)
		if err != nil {
			if !errors.Is(err, ErrCheckpoint) {
				t.Fatalf("error %v is not ErrCheckpoint", err)
			}
			return
		}
		again, err := ParseCheckpoint(c.String())
		if err != nil || again.String() != c.String() {
			t.Fatalf("%q → %q → %v", text, c.String(), err)
		}
	})
}

// BenchmarkAppendAuditSigned shows what signing adds to an audit append.
func BenchmarkAppendAuditSigned(b *testing.B) {
	for _, signed := range []bool{false, true} {
		name := "unsigned"
		if signed {
			name = "signed"
		}
		b.Run(name, func(b *testing.B) {
			s := openTest(b, b.TempDir(), Options{NoSync: true})
			if signed {
				priv, _, err := GenerateAuditKey()
				if err != nil {
					b.Fatal(err)
				}
				k, err := ParseAuditSigner(priv)
				if err != nil {
					b.Fatal(err)
				}
				if err := s.UseAuditKey(context.Background(), k, ""); err != nil {
					b.Fatal(err)
				}
			}
			for b.Loop() {
				if _, _, err := s.AppendAudit(context.Background(), AuditEntry{Actor: "qa.reviewer", Action: AuditConfigLoad}); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
