// Package site is the site configuration: it composes the section each
// package owns (zones and alarms of alerts, counters and sensors of
// collector, access and TLS of access) into one file, decodes it strictly
// (an unknown key, a wrong value or a failed cross-check is named at its
// file:line:col, all of them at once), checks what crosses sections, and
// carries the built-in demo site.
package site
