package store

import (
	"fmt"

	bolt "go.etcd.io/bbolt"
)

// echunks checks every environment chunk as pchunks does pressure chunks:
// key order, decoding (values within the bounds an append enforces),
// checksum, in a chunk whose checksum fails which samples changed (their
// tags no longer match), and that no sample is also in the head.
func (v *verifier) echunks(tx *bolt.Tx) {
	root := tx.Bucket(bucketEChunks)
	if root == nil {
		return
	}
	v.guarded(string(bucketEChunks), func() {
		_ = root.ForEach(func(name, val []byte) error {
			if val != nil {
				v.add("%s: entry %q is a value, not a bucket", bucketEChunks, name)
				return nil
			}
			if why := checkName(string(name)); why != "" {
				v.add("%s: bucket name %q: %s", bucketEChunks, name, why)
			}
			v.guarded(fmt.Sprintf("%s/%s", bucketEChunks, name), func() { v.echunkSeries(tx, string(name), root.Bucket(name)) })
			return nil
		})
	})
}

func (v *verifier) echunkSeries(tx *bolt.Tx, sensor string, b *bolt.Bucket) {
	head := tx.Bucket(bucketEnvironment).Bucket([]byte(sensor))
	var prevLast int64 = -1
	c := b.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		if val == nil {
			v.add("%s/%s: %s is a bucket, not a value", bucketEChunks, sensor, keyString(k))
			continue
		}
		es, tags, err := decodeEChunk(sensor, k, val)
		if es == nil {
			v.addErr(err)
			continue
		}
		if es[0].ns <= prevLast {
			v.add("environment chunk of sensor %q ending %s overlaps the chunk before it", sensor, keyString(k))
		}
		prevLast = es[len(es)-1].ns
		if err != nil {
			named := 0
			for i := range es {
				key := nanosKey(es[i].ns)
				if tagOf(es[i].v1Value(key)) != tags[i] {
					v.add("environment sample of sensor %q at %s: changed after it was stored (its chunk's checksum and its own tag do not match)", sensor, keyString(key))
					named++
				}
			}
			if named == 0 {
				v.addErr(err)
			}
		}
		v.echunkHead(sensor, head, es)
	}
}

// echunkHead reports the samples of a chunk the head holds too: a sample
// lives in one place. The head is searched only when it has a key in the
// chunk's span, which after a clean compaction it never has.
func (v *verifier) echunkHead(sensor string, head *bolt.Bucket, es []echunkSample) {
	if head == nil {
		return
	}
	if k, _ := head.Cursor().Seek(nanosKey(es[0].ns)); k == nil {
		return
	} else if ns, _ := keyNanos(k); ns > es[len(es)-1].ns {
		return
	}
	for i := range es {
		if key := nanosKey(es[i].ns); head.Get(key) != nil {
			v.add("environment sample of sensor %q at %s is both in the head and in a chunk", sensor, keyString(key))
		}
	}
}

// env is value for an environment sample: the cached chunk of its sensor,
// the head, or the chunk that would hold it. A chunk that does not
// decode gives nil (the walk of the chunks reports it).
func (cc *chunkCache) env(sensor string, key []byte) []byte {
	ns, ok := keyNanos(key)
	if !ok {
		return nil
	}
	if es := cc.e[sensor]; len(es) > 0 && ns >= es[0].ns && ns <= es[len(es)-1].ns {
		if v := findEnv(es, ns); v != nil {
			return v
		}
	}
	if b := cc.tx.Bucket(bucketEnvironment).Bucket([]byte(sensor)); b != nil {
		if v := b.Get(key); v != nil {
			return v
		}
	}
	es, _ := envChunkAt(cc.tx, sensor, key)
	if es == nil {
		return nil
	}
	if cc.e == nil {
		cc.e = map[string][]echunkSample{}
	}
	cc.e[sensor] = es
	return findEnv(es, ns)
}
