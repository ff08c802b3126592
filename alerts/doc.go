// Package alerts turns committed readings into what an engineer acts on.
//
// Judge is the one entry point: every committed particle reading, DP
// sample and instrument event goes through Judge.Observe once, and the
// API, the pages and the metrics read zone reports from it. It keeps, in
// one place, the operating state of each zone with its history in time
// (OperatingAt), each sampling location's rolling window (ZoneTracker),
// the latest DP of each sensor and the health of each instrument, and
// runs every alarm rule and the alarm lifecycle (Engine).
//
// A zone report carries the particle state (in-class, alert, action,
// out-of-class, unknown) and the zone's attention: the worst of that
// state, every open alarm of the zone, every DP sensor protecting it (low,
// reversed, silent) and every counter in it (silent, untrusted). Attention
// is none only when nothing needs a person; unknown is never shown as
// fine.
//
// Notifiers (webhook, Alertmanager, log) deliver alarm transitions from a
// persistent outbox, a heartbeat tells receivers the daemon is alive, and
// a daemon that stops never makes an open alarm look resolved.
//
// The package depends only on classify. Readings reach it after the store
// has made them durable, so that the state shown never runs ahead of the
// record. The tool supports, and does not replace, the site's qualified
// people, its procedures and the applicable standards and regulations.
package alerts
