package store

import "time"

// schemaVersion is stored under metaSchema. Bump it when the layout or a
// value encoding changes in a way older binaries cannot read.
const schemaVersion = 3

// Top-level buckets, one per kind of record. A new kind is added here, to
// knownBuckets, and to Verify; initSchema creates it in older files.
var (
	bucketMeta      = []byte("meta")               // schema version, sweep horizon
	bucketReadings  = []byte("readings")           // legacy head: counter → time → reading (files before the head log)
	bucketPressure  = []byte("pressure")           // sensor → time → pressure
	bucketRollup1m  = []byte("rollups_1m")         // schema 1 only: dropped by the upgrade
	bucketRollup1h  = []byte("rollups_1h")         // counter → bucket start → rollup
	bucketOpState   = []byte("opstate")            // zone → sequence → state change
	bucketJournal   = []byte("alarm_journal")      // sequence → alarm transition
	bucketJournalAt = []byte("alarm_journal_time") // time ‖ sequence → index mark
	bucketAlarms    = []byte("alarms")             // alarm ID → latest snapshot
	bucketAlarmsAt  = []byte("alarms_updated")     // updated ‖ alarm ID → index mark
	bucketOutbox    = []byte("outbox")             // notifier → item ID → item
	bucketAudit     = []byte("audit")              // sequence → chained audit entry
	bucketAuditSig  = []byte("audit_sig")          // sequence → key id ‖ Ed25519 signature (audit_sign.go)
	knownBuckets    = [][]byte{
		bucketMeta, bucketReadings, bucketPressure, bucketRollup1h, bucketOpState,
		bucketJournal, bucketJournalAt, bucketAlarms, bucketAlarmsAt, bucketOutbox, bucketAudit, bucketRuns, bucketAccounts,
		bucketAuditSig, bucketChunks, bucketEnvironment, bucketPChunks, bucketEChunks, bucketHeadLog,
		bucketAuditIndex, bucketAuditHours,
	}
	metaSchema      = []byte("schema")       // uvarint schemaVersion
	metaSweptBefore = []byte("swept_before") // 8-byte key: latest Sweep horizon
	metaEnvCovered  = []byte("env_covered")  // present once the audit chain covers environment samples
)

// rollupSteps lists the rollup resolutions maintained on every append.
// Only the hour is kept: at the sample period (a minute) a rollup holds
// one reading and costs more than it, and steps below the hour are
// computed from the readings as fast as they can be streamed; days and
// longer steps add up hours (a year is 8 760 of them).
var rollupSteps = []struct {
	step   time.Duration
	bucket []byte
}{
	{time.Hour, bucketRollup1h},
}

func rollupBucket(step time.Duration) []byte {
	for _, r := range rollupSteps {
		if r.step == step {
			return r.bucket
		}
	}
	return nil
}

// fillPercent packs pages densely: keys are time-ordered and nearly always
// appended at the end, so bbolt's default half-full split wastes space.
const fillPercent = 0.9
