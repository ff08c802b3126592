package main

import (
	"encoding/binary"
	"hash/crc32"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"

	"cleanmon/store"
)

// The audit chain as someone with the file and a bbolt tool, but without
// the signing key, sees it: the entry layout is documented on
// store.AuditEntry, the value is a version byte, the chain hash, the body
// and a CRC-32C (Castagnoli) over key and value, little-endian.

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// sealValue appends the checksum a stored value ends with.
func sealValue(key, v []byte) []byte {
	sum := crc32.Update(crc32.Checksum(key, castagnoli), castagnoli, v)
	return binary.LittleEndian.AppendUint32(v, sum)
}

// decodeEntry reads one stored audit entry.
func decodeEntry(t *testing.T, key, v []byte) store.AuditEntry {
	t.Helper()
	body := v[1+32 : len(v)-4]
	e := store.AuditEntry{Seq: binary.BigEndian.Uint64(key)}
	copy(e.Hash[:], v[1:33])
	ns, n := binary.Varint(body)
	body = body[n:]
	str := func() []byte {
		l, n := binary.Uvarint(body)
		s := body[n : n+int(l)]
		body = body[n+int(l):]
		return s
	}
	e.Time = time.Unix(0, ns).UTC()
	e.Actor, e.Action, e.Subject, e.Reason = string(str()), string(str()), string(str()), string(str())
	e.Detail = append([]byte(nil), str()...)
	return e
}

// entryBody is the body AuditEntry documents.
func entryBody(e store.AuditEntry) []byte {
	b := binary.AppendVarint(nil, e.Time.UnixNano())
	for _, s := range [][]byte{[]byte(e.Actor), []byte(e.Action), []byte(e.Subject), []byte(e.Reason), e.Detail} {
		b = binary.AppendUvarint(b, uint64(len(s)))
		b = append(b, s...)
	}
	return b
}

// rechainFile edits the audit chain of a store file and recomputes every
// hash, checksum and the issued sequence, so that the chain is whole
// again; with dropSigs the signatures beyond the new end go too. It is
// the rewrite that only a key, or a kept checkpoint, can find.
func rechainFile(t *testing.T, path string, dropSigs bool, edit func([]store.AuditEntry) []store.AuditEntry) {
	t.Helper()
	db, err := bolt.Open(path, 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	err = db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket([]byte("audit"))
		var es []store.AuditEntry
		var keys [][]byte
		c := b.Cursor()
		for k, v := c.First(); k != nil; k, v = c.Next() {
			es = append(es, decodeEntry(t, k, v))
			keys = append(keys, append([]byte(nil), k...))
		}
		for _, k := range keys {
			if err := b.Delete(k); err != nil {
				return err
			}
		}
		es = edit(es)
		var prev [32]byte
		for i, e := range es {
			key := binary.BigEndian.AppendUint64(nil, uint64(i+1))
			e.Seq = uint64(i + 1)
			h := e.Link(prev)
			v := append(append([]byte{1}, h[:]...), entryBody(e)...)
			if err := b.Put(key, sealValue(key, v)); err != nil {
				return err
			}
			prev = h
		}
		if err := b.SetSequence(uint64(len(es))); err != nil {
			return err
		}
		// The chain's indexes are derived from it: one who rewrites the
		// chain drops them, and the next start builds them from the
		// rewritten chain.
		for _, idx := range []string{"audit_by_action", "audit_by_hour"} {
			if err := tx.DeleteBucket([]byte(idx)); err != nil {
				return err
			}
		}
		if sigs := tx.Bucket([]byte("audit_sig")); dropSigs && sigs != nil {
			from := binary.BigEndian.AppendUint64(nil, uint64(len(es)+1))
			for k, _ := sigs.Cursor().Seek(from); k != nil; k, _ = sigs.Cursor().Seek(from) {
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

// editValue changes one stored value of a nested bucket (the second,
// to leave the first alone) and recomputes its checksum: what the
// records' own CRCs cannot find, and the chain's digests must. The byte
// changed is the middle one of the body: a count, a time or a shape in a
// chunk of readings, a sum or a maximum in a rollup.
func editValue(t *testing.T, path, bucket, sub string) {
	t.Helper()
	db, err := bolt.Open(path, 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	err = db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket([]byte(bucket)).Bucket([]byte(sub))
		if b == nil {
			t.Fatalf("no bucket %s/%s", bucket, sub)
		}
		c := b.Cursor()
		k, v := c.First()
		if nk, nv := c.Next(); nk != nil {
			k, v = nk, nv
		}
		if k == nil {
			t.Fatalf("%s/%s is empty", bucket, sub)
		}
		nv := append([]byte(nil), v[:len(v)-4]...)
		nv[len(nv)/2] ^= 0x01
		return b.Put(append([]byte(nil), k...), sealValue(k, nv))
	})
	if err != nil {
		t.Fatal(err)
	}
}
