// Package peers measures the time-series databases a site would otherwise
// keep its particle counters in, side by side with cleanmon, on the same
// readings: InfluxDB 1.x (Debian package influxdb, its write-ahead log
// fsynced on every write) and single-node VictoriaMetrics (Debian package
// victoria-metrics, which acknowledges before its data is on disk).
//
// Each peer runs on loopback from a temporary directory, one after the
// other, and receives:
//
//   - the live shape: N counters, one reading a minute each with four
//     cumulative channels (0.3, 0.5, 1 and 5 µm), in time order across all
//     counters, in line-protocol batches of 1 000 posted by 4 concurrent
//     writers. The figure is readings per second from the first request
//     to the last acknowledgement (for VictoriaMetrics, to the end of its
//     force_flush, which makes rows searchable but does not fsync them);
//   - bytes on disk per reading, after SIGTERM and the process's exit:
//     the blocks allocated to every regular file under the peer's storage
//     directory (InfluxDB: meta, data and wal; VictoriaMetrics:
//     -storageDataPath), divided by the readings of the live shape. The
//     apparent sizes are kept too; InfluxDB's preallocated sparse series
//     segments make them tens of megabytes larger than the disk used;
//   - after a restart on the same storage, one location's year of
//     per-minute readings (525 600), then its raw export and its hourly
//     means, each timed from the request to the last byte of the answer.
//
// Every figure is taken only after the peer has been asked how many points
// it holds and the count equals what was sent. The readings are invented
// (a fixed seed) for load only. Measured figures and the commands that
// made them are in testdata/peers-results.md.
package peers
