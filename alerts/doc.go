// Package alerts turns committed readings into what an engineer acts on.
//
// This file set holds the live zone state: per zone, per sampling location
// and per threshold size, the rolling mean concentration over the zone's
// window, judged against the limits of the zone's ISO 14644-1 class or EU GMP
// grade for its operating state and against the zone's alert and action
// levels (ZoneConfig, ZoneTracker). Alarm rules, the alarm lifecycle,
// notifiers and the Prometheus collectors live beside it.
//
// The package depends only on classify. Readings reach it as Observations
// handed over by the daemon after the store has made them durable, so that
// the state shown never runs ahead of the record.
package alerts
