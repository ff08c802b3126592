package store

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"slices"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
)

// bucketRuns holds production runs: run ID → run. Runs are few (a few
// thousand a year per site), so listing by zone and time scans the bucket
// rather than keeping an index that would have to be verified too.
var bucketRuns = []byte("runs")

// Audit actions of production runs, written by the store in the
// transaction of the change they record.
const (
	AuditRunCreate = "run-create" // a run recorded (Detail: the stored value)
	AuditRunClose  = "run-close"  // an open run given its end (Detail: the stored value)
)

// ErrRunExists: a run with the same ID is already recorded. It comes
// wrapped together with a *RecordError naming the ID field.
var ErrRunExists = errors.New("store: run already recorded")

// Run is a production run (a batch, a wafer lot) in a zone, for the
// exposure of products to excursions. A zero End is a run still going on.
type Run struct {
	ID, Zone     string
	Start, End   time.Time
	Product, Lot string
	By           string    // who recorded it; empty: the daemon itself
	Recorded     time.Time // set by the store when the run is created
}

// Open tells whether the run has no end yet.
func (r Run) Open() bool { return r.End.IsZero() }

func checkRun(r *Run) (field, reason string) {
	if why := checkName(r.ID); why != "" {
		return "ID", why
	}
	if why := checkName(r.Zone); why != "" {
		return "Zone", why
	}
	if why := checkTime(r.Start); why != "" {
		return "Start", why
	}
	if !r.End.IsZero() {
		if why := checkTime(r.End); why != "" {
			return "End", why
		}
		if !r.End.After(r.Start) {
			return "End", fmt.Sprintf("%s is not after Start %s", r.End.Format(time.RFC3339Nano), r.Start.Format(time.RFC3339Nano))
		}
	}
	for _, f := range []struct{ name, v string }{{"Product", r.Product}, {"Lot", r.Lot}, {"By", r.By}} {
		if len(f.v) > maxNameLen {
			return f.name, fmt.Sprintf("%d bytes, more than %d", len(f.v), maxNameLen)
		}
	}
	return "", ""
}

// CreateRuns records runs durably, all or none, each with its audit
// entry (Actor by, or AuditActorSystem when empty). A bad run gives a
// *RecordError with its index; an ID already recorded, or twice in runs,
// gives ErrRunExists as well.
func (s *Store) CreateRuns(ctx context.Context, runs []Run, by string) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	now := time.Now().UTC()
	runs = slices.Clone(runs) // the caller's slice is not changed
	seen := map[string]bool{}
	for i := range runs {
		r := &runs[i]
		r.Start, r.End, r.By, r.Recorded = r.Start.UTC(), r.End.UTC(), by, now
		if field, reason := checkRun(r); field != "" {
			return &RecordError{Kind: "run", Index: i, Field: field, Reason: reason}
		}
		if seen[r.ID] {
			return runExists(i, r.ID, "twice in this call")
		}
		seen[r.ID] = true
	}
	return s.submit(ctx, len(runs), func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketRuns)
		for i := range runs {
			key := []byte(runs[i].ID)
			if b.Get(key) != nil {
				return runExists(i, runs[i].ID, "already recorded")
			}
			val := encodeRun(key, &runs[i])
			if err := b.Put(key, val); err != nil {
				return err
			}
			if err := auditRun(tx, AuditRunCreate, &runs[i], val); err != nil {
				return err
			}
		}
		return nil
	})
}

func runExists(i int, id, why string) error {
	return fmt.Errorf("%w: %w", ErrRunExists, &RecordError{Kind: "run", Index: i, Field: "ID", Reason: fmt.Sprintf("%q %s", id, why)})
}

func auditRun(tx *bolt.Tx, action string, r *Run, val []byte) error {
	_, _, err := appendAudit(tx, &AuditEntry{
		Time: time.Now().UTC(), Actor: actorOrSystem(r.By), Action: action,
		Subject: r.ID + ": " + r.Zone, Detail: val,
	})
	return err
}

// CloseRun gives the open run id its end, durably and audited (Actor by).
// A run not recorded gives ErrNotFound; a run already closed, or an end
// not after its start, a *RecordError on End.
func (s *Store) CloseRun(ctx context.Context, id string, end time.Time, by string) (Run, error) {
	if err := s.enter(); err != nil {
		return Run{}, err
	}
	defer s.exit()
	var out Run
	err := s.submit(ctx, 1, func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketRuns)
		key := []byte(id)
		v := b.Get(key)
		if v == nil {
			return fmt.Errorf("%w: run %q", ErrNotFound, id)
		}
		r, err := decodeRun(key, v)
		if err != nil {
			return err
		}
		if !r.Open() {
			return &RecordError{Kind: "run", Field: "End", Reason: fmt.Sprintf("run %q already ended at %s", id, r.End.Format(time.RFC3339Nano))}
		}
		r.End = end.UTC()
		if field, reason := checkRun(&r); field != "" {
			return &RecordError{Kind: "run", Field: field, Reason: reason}
		}
		closer := r
		closer.By = by
		val := encodeRun(key, &r)
		if err := b.Put(key, val); err != nil {
			return err
		}
		out = r
		return auditRun(tx, AuditRunClose, &closer, val)
	})
	return out, err
}

// Run returns the run id, or ErrNotFound.
func (s *Store) Run(id string) (Run, error) {
	if err := s.enter(); err != nil {
		return Run{}, err
	}
	defer s.exit()
	var out Run
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		v := tx.Bucket(bucketRuns).Get([]byte(id))
		if v == nil {
			return fmt.Errorf("%w: run %q", ErrNotFound, id)
		}
		var err error
		out, err = decodeRun([]byte(id), v)
		return err
	})
	return out, err
}

// Runs returns the runs of zone (every zone when empty) that overlap
// [from, to], edges included, an open run reaching to the end of time;
// a zero from or to is unbounded. They come in order of start, then ID.
func (s *Store) Runs(zone string, from, to time.Time) ([]Run, error) {
	if !from.IsZero() && !to.IsZero() && to.Before(from) {
		return nil, fmt.Errorf("%w: range from %s is after to %s", ErrInvalid, from.Format(time.RFC3339Nano), to.Format(time.RFC3339Nano))
	}
	if err := s.enter(); err != nil {
		return nil, err
	}
	defer s.exit()
	var out []Run
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		return tx.Bucket(bucketRuns).ForEach(func(k, v []byte) error {
			r, err := decodeRun(k, v)
			if err != nil {
				return err
			}
			if (zone == "" || r.Zone == zone) && (to.IsZero() || !r.Start.After(to)) && (from.IsZero() || r.Open() || !r.End.Before(from)) {
				out = append(out, r)
			}
			return nil
		})
	})
	sortRuns(out)
	return out, err
}

func sortRuns(rs []Run) {
	slices.SortFunc(rs, func(a, b Run) int {
		if c := a.Start.Compare(b.Start); c != 0 {
			return c
		}
		return strings.Compare(a.ID, b.ID)
	})
}

// runCRC is CRC-32C, as for every other stored value.
var runCRC = crc32.MakeTable(crc32.Castagnoli)

const runVersion = 1

// encodeRun: version byte, then Zone, Product, Lot, By as uvarint-length
// strings, Start, End (0: open) and Recorded as varint Unix nanoseconds,
// and a CRC-32C over key and value.
func encodeRun(key []byte, r *Run) []byte {
	b := []byte{runVersion}
	for _, s := range []string{r.Zone, r.Product, r.Lot, r.By} {
		b = binary.AppendUvarint(b, uint64(len(s)))
		b = append(b, s...)
	}
	end := int64(0)
	if !r.End.IsZero() {
		end = r.End.UnixNano()
	}
	for _, ns := range []int64{r.Start.UnixNano(), end, r.Recorded.UnixNano()} {
		b = binary.AppendVarint(b, ns)
	}
	sum := crc32.Update(crc32.Checksum(key, runCRC), runCRC, b)
	return binary.BigEndian.AppendUint32(b, sum)
}

func decodeRun(key, v []byte) (Run, error) {
	bad := func(why string) (Run, error) {
		return Run{}, fmt.Errorf("%w: run %q: %s", ErrCorrupt, key, why)
	}
	if len(v) < 5 {
		return bad("value too short")
	}
	body, sum := v[:len(v)-4], binary.BigEndian.Uint32(v[len(v)-4:])
	if crc32.Update(crc32.Checksum(key, runCRC), runCRC, body) != sum {
		return bad("checksum mismatch")
	}
	if body[0] != runVersion {
		return bad(fmt.Sprintf("unknown encoding version %d", body[0]))
	}
	r := Run{ID: string(key)}
	rd := bytes.NewReader(body[1:])
	for _, dst := range []*string{&r.Zone, &r.Product, &r.Lot, &r.By} {
		n, err := binary.ReadUvarint(rd)
		if err != nil || n > uint64(rd.Len()) {
			return bad("string cut short")
		}
		s := make([]byte, n)
		_, _ = rd.Read(s)
		*dst = string(s)
	}
	var ns [3]int64
	for i := range ns {
		x, err := binary.ReadVarint(rd)
		if err != nil {
			return bad("time cut short")
		}
		ns[i] = x
	}
	if rd.Len() != 0 {
		return bad("trailing bytes")
	}
	r.Start, r.Recorded = time.Unix(0, ns[0]).UTC(), time.Unix(0, ns[2]).UTC()
	if ns[1] != 0 {
		r.End = time.Unix(0, ns[1]).UTC()
	}
	return r, nil
}
