package store

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"runtime/debug"
	"strconv"
	"sync"
	"sync/atomic"
	"time"

	bolt "go.etcd.io/bbolt"
)

// FileName is the database file inside the data directory.
const FileName = "cleanmon.db"

// DefaultLockTimeout is how long Open waits for the file lock when
// Options.LockTimeout is zero: long enough to ride over a restart, short
// enough that a second daemon on the same directory is refused at once.
const DefaultLockTimeout = time.Second

// initialMmap is mapped up front so that a long read transaction (a year
// of readings streamed to a slow HTTP client, a backup) rarely holds up a
// writer: bbolt must wait for readers before it can grow the mapping. It
// is address space, not memory or disk.
var initialMmap = func() int {
	if strconv.IntSize == 64 {
		return 1 << 30
	}
	return 64 << 20
}()

// allocSize is the file growth step (bbolt's default is 16 MB): a store
// grows a few MB a day at a site, so 1 MB steps cost a handful of extra
// syncs a day and keep a small store small.
const allocSize = 1 << 20

// Options tune Open. The zero value is right for the daemon.
type Options struct {
	// LockTimeout bounds the wait for the file lock (default
	// DefaultLockTimeout). A lock still held after it gives ErrLocked.
	LockTimeout time.Duration `yaml:"lock_timeout"`
	// NoSync skips fsync on commit. Tests only: a crash loses
	// acknowledged records.
	NoSync bool `yaml:"-"`
	// MaxBytes caps the data in the file (0: no cap). A commit that
	// needs more fails with ErrDiskFull, like a full disk.
	MaxBytes int64 `yaml:"max_bytes"`
	// CompactEvery is how often a background pass moves head readings
	// into chunks (0: DefaultCompactEvery; negative: never, Close and
	// Compact still do).
	CompactEvery time.Duration `yaml:"compact_every"`
	// Logger receives the rare events the caller cannot see in a return
	// value (a damaged rollup rebuilt, a recovered panic). Nil: discarded.
	Logger *slog.Logger `yaml:"-"`
	// KeepFreePages turns off the rewrite of a small file that is at
	// least half free pages at a clean stop (see Close).
	KeepFreePages bool `yaml:"keep_free_pages"`

	commit   commitMode // how writes share transactions (tests, benchmarks)
	keepHead bool       // tests: Close leaves the head as it is
}

// Store is an open database. Its methods are safe for concurrent use.
type Store struct {
	db   *bolt.DB
	path string
	opt  Options
	log  *slog.Logger

	mu       sync.Mutex
	closed   bool
	inflight sync.WaitGroup

	reqs          chan *request
	committerDone chan struct{}
	compactStop   chan struct{}
	compactDone   chan struct{}
	kick          chan struct{} // wakes the compactor early; nil when it does not run
	sinceCompact  atomic.Int64  // readings stored since the last pass began
	commits       atomic.Uint64 // write transactions committed for grouped calls
	lastBatchTx   atomic.Pointer[bolt.Tx]
	beforeCommit  func() // test hook: runs before a group is collected; set before the first write
	head          *headState
}

// Open opens, or creates, the store in dir (created 0700 if missing) and
// its file dir/cleanmon.db. A file held by another process gives ErrLocked
// after Options.LockTimeout; a truncated or damaged file gives ErrCorrupt;
// a file of a newer program version gives ErrSchema.
func Open(dir string, opt Options) (*Store, error) {
	if dir == "" {
		return nil, fmt.Errorf("%w: empty data directory", ErrInvalid)
	}
	if opt.LockTimeout <= 0 {
		opt.LockTimeout = DefaultLockTimeout
	}
	if opt.MaxBytes < 0 {
		return nil, fmt.Errorf("%w: MaxBytes %d is negative", ErrInvalid, opt.MaxBytes)
	}
	if err := os.MkdirAll(dir, 0o700); err != nil {
		return nil, fmt.Errorf("store: create data directory: %w", err)
	}
	path := filepath.Join(dir, FileName)
	if err := probeFile(path, opt.LockTimeout); err != nil {
		return nil, err
	}
	log := opt.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	db, err := openBolt(path, &bolt.Options{
		Timeout:         opt.LockTimeout,
		NoSync:          opt.NoSync,
		MaxSize:         int(opt.MaxBytes),
		InitialMmapSize: initialMmap,
		FreelistType:    bolt.FreelistMapType,
	})
	if err != nil {
		return nil, err
	}
	// bbolt grows the file 16 MB at a time and never gives it back; the
	// head's churn is reused in place, so smaller steps keep a small
	// store small at the cost of a few more grow calls.
	db.AllocSize = allocSize
	s := &Store{
		db:            db,
		path:          path,
		opt:           opt,
		log:           log,
		reqs:          make(chan *request, 1024),
		committerDone: make(chan struct{}),
		head:          newHeadState(),
	}
	if err := s.initSchema(); err != nil {
		_ = db.Close()
		return nil, err
	}
	if err := s.upgrade(); err != nil {
		_ = db.Close()
		return nil, err
	}
	if err := s.coverEnvironmentOnce(); err != nil { // envcover.go
		log.Warn("store: could not start the audit cover of environment samples; verify will name the older ones as not covered", "path", path, "err", err)
	}
	if _, err := s.markRunning(); err != nil { // unclean.go; reads stay served on a full disk
		log.Warn("store: could not mark the store open; an unclean stop of this run will not be recorded", "path", path, "err", err)
	}
	go s.committer()
	every := opt.CompactEvery
	if every == 0 {
		every = DefaultCompactEvery
	}
	if every > 0 {
		s.compactStop, s.compactDone, s.kick = make(chan struct{}), make(chan struct{}), make(chan struct{}, 1)
		go s.compactor(every, s.compactStop, s.compactDone)
	}
	return s, nil
}

// Path is the database file.
func (s *Store) Path() string { return s.path }

// Close waits for the calls in flight (commits included) to return, then
// closes the file. Calls made after Close begins return ErrClosed. A
// second Close returns nil.
func (s *Store) Close() error {
	s.mu.Lock()
	if s.closed {
		s.mu.Unlock()
		return nil
	}
	s.closed = true
	s.mu.Unlock()
	s.inflight.Wait()
	close(s.reqs)
	<-s.committerDone
	if s.compactStop != nil {
		close(s.compactStop)
		<-s.compactDone
	}
	// A clean stop leaves the head empty: the store at rest is all chunks.
	if !s.opt.keepHead {
		if _, err := s.compact(context.Background(), 1); err != nil {
			s.log.Error("store: compaction at close failed; readings stay in the head", "error", err.Error())
		}
	}
	shrink := s.worthShrinking()
	s.closeAudit() // unclean.go
	if err := s.db.Close(); err != nil {
		return err
	}
	if shrink { // compactfile.go; the store is closed and whole whatever this does
		res, err := CompactFile(filepath.Dir(s.path), 0)
		if err != nil {
			s.log.Warn("store: could not rewrite the file without its free pages at the stop; `cleanmon compact` can", "error", err.Error())
		} else {
			s.log.Info("store: file rewritten without its free pages at the stop", "before_bytes", res.Before, "after_bytes", res.After, "took", res.Took.String())
		}
	}
	return nil
}

// Shrinking at a clean stop (Close): a file at least a quarter free pages
// (the head log's high-water mark, chunks rewritten as they grew) is
// rewritten without them when it is small enough that the copy takes
// seconds; a larger one is left for `cleanmon compact`, run when the site
// chooses. A quarter, not a half: the head log's records leave about as
// many pages free as the chunks take (measured by `cleanmon bench`: 27.9
// bytes a reading on disk before the rewrite, 13.6 after).
const (
	shrinkMinBytes = 8 << 20
	shrinkMaxBytes = 512 << 20
)

func (s *Store) worthShrinking() bool {
	if s.opt.KeepFreePages {
		return false
	}
	info, err := os.Stat(s.path)
	if err != nil || info.Size() < shrinkMinBytes || info.Size() > shrinkMaxBytes {
		return false
	}
	st := s.db.Stats()
	pages := info.Size() / int64(s.db.Info().PageSize)
	return int64(st.FreePageN+st.PendingPageN)*4 >= pages
}

// enter registers a call in flight; every exported method that touches
// the database brackets itself with enter and exit.
func (s *Store) enter() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closed {
		return ErrClosed
	}
	s.inflight.Add(1)
	return nil
}

func (s *Store) exit() { s.inflight.Done() }

func lockedError(path string) error {
	return fmt.Errorf("%w: %s is held by another process (is a second daemon using this data directory?)", ErrLocked, path)
}

func corruptError(path string, detail error) error {
	return fmt.Errorf("%w: %s: %v; %s", ErrCorrupt, path, detail, corruptHint(path))
}

// openBolt opens the file, turning bbolt's errors and its panics on
// damaged meta or freelist pages into store errors. A panic inside
// bolt.Open leaves no *DB to close, so the file it opened is captured and
// closed here: otherwise its lock would outlive the failure.
func openBolt(path string, o *bolt.Options) (*bolt.DB, error) {
	// CompactFile replaces the file while holding its lock: a process that
	// opened the old file and then waited for the lock would write into a
	// file no longer in place. It checks, and opens the new one.
	for try := 0; ; try++ {
		db, file, err := openBoltOnce(path, o)
		if err != nil || try == 2 {
			return db, err
		}
		in, ierr := file.Stat()
		now, nerr := os.Stat(path)
		if ierr != nil || nerr != nil || os.SameFile(in, now) {
			return db, nil
		}
		_ = db.Close()
	}
}

func openBoltOnce(path string, o *bolt.Options) (db *bolt.DB, file *os.File, err error) {
	o.OpenFile = func(name string, flag int, perm os.FileMode) (*os.File, error) {
		f, err := os.OpenFile(name, flag, perm)
		file = f
		return f, err
	}
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	defer func() {
		if r := recover(); r != nil {
			if file != nil {
				_ = file.Close()
			}
			db, err = nil, corruptError(path, fmt.Errorf("bbolt panicked while opening: %v", r))
		}
	}()
	db, err = bolt.Open(path, 0o600, o)
	switch {
	case err == nil:
		return db, file, nil
	case errors.Is(err, bolt.ErrTimeout):
		return nil, nil, lockedError(path)
	case errors.Is(err, fs.ErrPermission), errors.Is(err, fs.ErrNotExist):
		return nil, nil, fmt.Errorf("store: open %s: %w", path, err)
	}
	return nil, nil, corruptError(path, err)
}

// probeFile opens an existing file read-only and checks that it is as
// long as its meta page says: bbolt does not check the length itself, and
// a read past the end of a mapping is a fatal fault. The probe also loads
// the freelist, where bbolt panics on a damaged freelist page: a panic
// inside bolt.Open leaks its mapping, and the mapping keeps the file's
// lock, so it had better be the shared lock of this read-only probe (a
// later Verify or Open still gets in and reports ErrCorrupt) than the
// exclusive one of the write open. An existing empty file is refused
// rather than silently started afresh.
func probeFile(path string, timeout time.Duration) error {
	info, err := os.Stat(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("store: %w", err)
	}
	if !info.Mode().IsRegular() {
		return fmt.Errorf("%w: %s is not a regular file", ErrInvalid, path)
	}
	if info.Size() == 0 {
		return corruptError(path, errors.New("the file is empty (a store file is never empty)"))
	}
	db, err := openBolt(path, &bolt.Options{ReadOnly: true, Timeout: timeout, PreLoadFreelist: true})
	if err != nil {
		return err
	}
	defer db.Close()
	return checkLength(db, path, info.Size())
}

func checkLength(db *bolt.DB, path string, size int64) error {
	return db.View(func(tx *bolt.Tx) error {
		if need := tx.Size(); size < need {
			return corruptError(path, fmt.Errorf("the file is truncated: %d bytes, its meta page needs %d", size, need))
		}
		return nil
	})
}

// initSchema checks the meta bucket and creates what is missing: all of it
// in a new file, new kinds of bucket in an older one.
func (s *Store) initSchema() error {
	missing := false
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		meta := tx.Bucket(bucketMeta)
		if meta == nil {
			var other []string
			_ = tx.ForEach(func(name []byte, _ *bolt.Bucket) error {
				other = append(other, string(name))
				return nil
			})
			if len(other) > 0 {
				return corruptError(s.path, fmt.Errorf("no %q bucket but %q: not a cleanmon store", bucketMeta, other))
			}
			missing = true
			return nil
		}
		if err := checkSchema(meta); err != nil {
			if errors.Is(err, ErrSchema) {
				return fmt.Errorf("%w: %s: %v", ErrSchema, s.path, err)
			}
			return corruptError(s.path, err)
		}
		for _, name := range knownBuckets {
			if tx.Bucket(name) == nil {
				missing = true
			}
		}
		return probeLatest(tx)
	})
	if err != nil {
		if !errors.Is(err, ErrCorrupt) && !errors.Is(err, ErrSchema) {
			err = corruptError(s.path, err)
		}
		return err
	}
	if !missing {
		return nil
	}
	return s.update(func(tx *bolt.Tx) error {
		startChain := tx.Bucket(bucketAudit) == nil
		buildIndex := !startChain && tx.Bucket(bucketAuditIndex) == nil
		buildHours := !startChain && tx.Bucket(bucketAuditHours) == nil
		for _, name := range knownBuckets {
			if _, err := tx.CreateBucketIfNotExists(name); err != nil {
				return err
			}
		}
		meta := tx.Bucket(bucketMeta)
		if meta.Get(metaSchema) == nil {
			if err := meta.Put(metaSchema, binary.AppendUvarint(nil, schemaVersion)); err != nil {
				return err
			}
		}
		if buildIndex {
			if err := buildAuditIndex(tx); err != nil {
				return err
			}
		}
		if buildHours {
			if err := buildAuditHours(tx); err != nil {
				return err
			}
		}
		if !startChain {
			return nil
		}
		if err := meta.Put(metaEnvCovered, []byte{1}); err != nil { // the chain start covers them
			return err
		}
		detail, err := chainStartDetail(tx)
		if err != nil {
			return err
		}
		_, _, err = appendAudit(tx, &AuditEntry{
			Time: time.Now().UTC(), Actor: AuditActorSystem, Action: AuditChainStart,
			Reason: "audit chain started", Detail: detail,
		})
		return err
	})
}

func checkSchema(meta *bolt.Bucket) error {
	v := meta.Get(metaSchema)
	ver, n := binary.Uvarint(v)
	if n <= 0 || n != len(v) {
		return fmt.Errorf("schema version %x is not a varint", v)
	}
	if ver == 0 || ver > schemaVersion {
		return fmt.Errorf("%w: the file has schema %d, this program reads up to %d", ErrSchema, ver, schemaVersion)
	}
	return nil
}

// probeLatest decodes the newest record of every series: the pages a
// daemon reads first after a restart, checked before it acknowledges
// anything.
func probeLatest(tx *bolt.Tx) error {
	for _, kind := range [][]byte{bucketReadings, bucketPressure, bucketRollup1h, bucketOpState} {
		root := tx.Bucket(kind)
		if root == nil {
			continue
		}
		err := root.ForEachBucket(func(name []byte) error {
			b := root.Bucket(name)
			k, v := b.Cursor().Last()
			if k == nil {
				return nil
			}
			var err error
			switch {
			case bytes.Equal(kind, bucketReadings):
				_, err = decodeReading(string(name), k, v)
			case bytes.Equal(kind, bucketPressure):
				_, err = decodePressure(string(name), k, v)
			case bytes.Equal(kind, bucketOpState):
				_, err = decodeOpState(string(name), k, v)
			default:
				_, err = decodeRollup(string(name), time.Hour, k, v)
			}
			return err
		})
		if err != nil {
			return err
		}
	}
	if l := tx.Bucket(bucketHeadLog); l != nil {
		if k, v := l.Cursor().Last(); k != nil {
			if _, err := decodeHeadRec(k, v, false); err != nil {
				return err
			}
		}
	}
	if j := tx.Bucket(bucketJournal); j != nil {
		if k, v := j.Cursor().Last(); k != nil {
			if _, err := decodeJournal(k, v); err != nil {
				return err
			}
		}
	}
	return nil
}

// guard tells the recover in view whether a panic came from the caller's
// callback (let it go with its own stack) or from bbolt (a damaged page).
type guard struct{ inUser bool }

func (g *guard) call(f func() error) error {
	g.inUser = true
	err := f()
	g.inUser = false
	return err
}

// view runs a read transaction, converting bbolt panics and memory faults
// on damaged pages into ErrCorrupt.
func (s *Store) view(fn func(tx *bolt.Tx, g *guard) error) (err error) {
	g := &guard{}
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	defer func() {
		if !g.inUser {
			if r := recover(); r != nil {
				err = s.panicError("read", r)
			}
		}
	}()
	return s.db.View(func(tx *bolt.Tx) error { return fn(tx, g) })
}

// update runs a write transaction with the same protection as view and
// maps commit failures (disk full) to store errors.
func (s *Store) update(fn func(tx *bolt.Tx) error) (err error) {
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	defer func() {
		if r := recover(); r != nil {
			err = s.panicError("write", r)
		}
	}()
	return commitError(s.db.Update(fn))
}

func (s *Store) panicError(op string, r any) error {
	s.log.Error("store: recovered panic", "op", op, "path", s.path, "panic", fmt.Sprint(r), "stack", string(debug.Stack()))
	return corruptError(s.path, fmt.Errorf("%s transaction panicked: %v", op, r))
}
