// Package store is the embedded database of the daemon: one bbolt file,
// dir/cleanmon.db, holding particle-counter readings (head and compressed
// chunks), differential-pressure and environment samples, hourly rollups,
// the operating-state history
// of each zone, the alarm journal with each alarm's latest snapshot, the
// notification outbox, and the audit chain over all of it.
//
// # Durability
//
// Every Append and SetOperatingState call returns only after its
// transaction has been fsynced (Options.NoSync exists for tests only), so a
// sender may be acknowledged as soon as the call returns: the record
// survives a crash or kill -9. A call is all-or-nothing: the whole slice is
// validated first (a *RecordError names the index and field of the first
// bad record) and then stored in one transaction, or nothing is.
//
// # Group commit
//
// Concurrent callers share transactions. A single committer goroutine takes
// every request that is waiting when it starts a transaction and commits
// them together, so N concurrent callers pay for about one fsync rather
// than N. The alternative, bbolt's DB.Batch, was measured against it (the
// benchmarks in bench_test.go, on 2 cores): Batch waits for its 10 ms
// timer before every transaction, which costs a lone caller that delay on
// every call (1 000-reading batches: about 58 000 readings/s against
// 250 000), and 16 concurrent callers also fared better with the
// committer (100-reading calls: 179 000 against 75 000 readings/s).
//
// # Layout
//
// One top-level bucket per kind of record (see buckets.go), a nested bucket
// per counter, sensor or zone, and 8-byte big-endian Unix-nanosecond keys,
// so that a cursor walks time in order. Values are a compact binary
// encoding (codec.go) that starts with a version byte and ends with a
// CRC-32C over key and value: bbolt checksums only its meta pages, and the
// audit trail must show when a stored value changed.
//
// # Readings: head and chunks
//
// A reading is first written to the head. The head is a log
// (headlog/<sequence>, headlog.go): each AppendReadings call that stores
// anything adds one record holding all its readings (schema-1 values,
// grouped by counter), so a durable append writes one run of pages
// whatever the number of counters in it. Records are never changed, only
// deleted; decoded ones are kept in memory by sequence number, and the
// writer keeps an index of the head by counter and time for its
// duplicate check, read again from the log at each write transaction, so
// nothing a rolled-back transaction did stays in it. A background
// compaction (compact.go) moves whole records into chunks
// (chunks/<counter>/<time of the last reading>, chunk.go): times as
// delta-of-delta run-length coded, the constant part of each reading
// (status, volume, flow, channel sizes) run-length coded, counts as
// zigzag varint deltas per channel, a one-byte tag per reading. The
// chunks, the hourly rollups of the readings moved and the removal of
// the records change in one transaction, so a crash leaves each reading
// in exactly one place and counted once. A background pass moves the log
// once it holds 32 Ki readings, early once 64 Ki arrived, and at Close, so
// a cleanly stopped store is all chunks. Scans merge chunks and head from
// a Seek: an empty stretch of time costs nothing whatever its length
// (CheckRange bounds what a request may ask).
//
// Files written before schema 3 hold their head one value per reading
// (readings/<counter>/<time>, the legacy head, already rolled up); it is
// read as it is and moved into chunks by the next compaction.
//
// A chunked reading turns back into exactly the bytes the head held for
// it, so the audit chain's digests, taken at ingest, still cover it:
// Verify names a reading changed (its tag), removed (the audit entry
// lists its key) or added (not covered) after compaction as before.
//
// Rollups are kept at one hour only (rollups_1h, updated by compaction
// for the readings it moves): at the sample period a rollup costs more
// than the reading; finer steps (1, 5, 15, 30 min) are computed from the
// readings and longer ones (2 to 24 h) add hours; a query adds the head
// log's readings to the kept hours. Rows lie inside the range asked for,
// edges clipped.
//
// Pressure samples take the same path into their own chunks (pchunk.go:
// values as millipascal deltas when every sample of a chunk is a whole
// number of them, as XORed float bits otherwise). So do environment
// samples (temperature, humidity, air velocity, any subset;
// environment.go), into echunks/<sensor>/<time of the last sample>
// (echunk.go): the set of quantities each sample carries run-length
// coded, each quantity as deltas of whole thousandths of its unit (m°C,
// 0.001 %RH, mm/s) over their common divisor, or as XORed float bits
// when a value of the chunk is no whole thousandth, and a tag per sample.
// A probe sending 21.3 °C and 45.2 %RH once a minute costs about three
// bytes a sample at rest, against thirty in the head. Chunked pressure
// and environment samples turn back into the bytes their head values
// had, so the audit chain covers them as it covers readings.
//
// # Older files
//
// A schema-1 file (one value per reading, minute rollups) is upgraded when
// first opened, after a backup next to it (cleanmon.db.schema1-*.bak): its
// readings are read as they are, as head, and move into chunks with the
// next compaction; the minute rollups are dropped. testdata/v1 holds such
// a file, written by the schema-1 code, and TestSchema1StoreOpens opens it.
// A schema-2 file (legacy head, pressure chunks) is upgraded the same way,
// after a backup (cleanmon.db.schema2-*.bak): nothing in it is rewritten,
// the head log and environment chunk buckets are added, and its legacy
// head moves into chunks with the next compaction.
//
// # Alarms and notifications
//
// RecordAlarms writes, in one transaction, the journal entries of a set
// of alarm transitions, each alarm's latest snapshot, and one outbox item
// per transition and notifier, so a transition is never announced without
// being on record nor on record without being announced. The records are
// opaque bytes: the alarm engine's adapter marshals them. The journal is
// append-only and numbered 1, 2, 3, …; Sweep never touches it, nor the
// snapshots of open alarms, nor the outbox, and Verify reports any gap in
// the numbering as removed entries. Two small indexes (journal by time,
// snapshots by update time) serve the scans by time and the sweep of
// cleared alarms; each notifier has its own queue, so one that is down
// does not slow the others' OutboxDue.
//
// # Audit chain
//
// The audit bucket is a hash chain (AuditEntry documents the link): each
// entry's SHA-256 covers its content and the hash of the entry before.
// The store writes its own entries inside the transaction of the change
// they record, so neither exists without the other: one per
// AppendReadings, AppendPressure or AppendEnvironment call that stored
// anything (listing the stored keys with a SHA-256 over their keys and
// values), per operating state change, per alarm record
// (acknowledgements included), per Sweep chunk (its horizon and counts),
// and after each backup. The daemon adds start, stop and configuration
// loads with AppendAudit. Verify recomputes every link and names the
// first broken one, recomputes every covered record's digest, and counts
// that every stored reading, pressure and environment sample (head or
// chunk), state change and journal entry is covered once, so a record
// edited, removed or added behind the store's back shows, not only an
// edited audit entry. A chain rewritten consistently from the edit
// onwards is caught only by a copy of an earlier AuditHead kept outside
// the daemon. Listing the keys costs about two bytes a reading at a
// steady sample period.
//
// Two indexes follow the chain, so that readers need not walk millions of
// ingest covers (audit_index.go): audit_by_action lists the entries
// callers write (sign-ins, signatures, account changes) by action, and
// audit_by_hour names, for each hour, the first entry appended in it, an
// entry's append time being the later of the clock and its own time.
// Every entry before the one an hour names is then older than that hour,
// so ScanAuditSince starts there and leaves nothing out. Open builds both
// for a file written before them; Verify checks both against the chain
// (an entry unlisted or listed wrongly, an hour that would hide an entry).
//
// # Damage
//
// Open refuses a truncated or damaged file with an error wrapping
// ErrCorrupt that points at `cleanmon verify` and the latest backup; panics
// and memory faults that bbolt raises on damaged pages are turned into
// ErrCorrupt where Go allows it. Verify runs bbolt's page check and the
// store's own invariants on a file that no daemon holds open.
package store
