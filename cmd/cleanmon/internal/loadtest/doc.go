// Package loadtest drives the real daemon from outside, as a site would:
// `cleanmon bench` (ingest throughput and acknowledgement latency against
// a bare bbolt baseline, range-query times), `cleanmon soak` (ingest and
// queries together for a bounded time, then a verified store), and the
// child-process runner both of them and the crash tests use.
package loadtest
