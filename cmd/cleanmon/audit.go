package main

import (
	"context"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"log/slog"
	"net/http"
	"time"
	"unicode"
	"unicode/utf8"

	"github.com/prometheus/client_golang/prometheus"

	"cleanmon/store"
)

// auditLog records the daemon's own events (start, stop, configuration
// load, clock steps) in the store's audit chain. The store records
// everything else itself, inside the transaction of each change.
type auditLog struct {
	st  *store.Store
	log *slog.Logger
}

// record appends one entry and logs the new chain head, so that an outside
// system collecting the logs holds a copy of it: a later rewrite of the
// chain cannot match a head already shipped elsewhere.
func (a auditLog) record(ctx context.Context, actor, action, subject, reason string, detail []byte) {
	seq, head, err := a.st.AppendAudit(ctx, store.AuditEntry{Actor: actor, Action: action, Subject: subject, Reason: reason, Detail: detail})
	if err != nil {
		a.log.Error("audit entry not recorded", "action", action, "err", err)
		return
	}
	a.log.Info("audit", "action", action, "subject", subject, "seq", seq, "head", hex.EncodeToString(head[:]))
}

// clockWatch notices a step of the wall clock (an NTP correction, an
// operator setting the time) by comparing how far it moved with how far
// the monotonic clock did, and records it: readings carry their
// instruments' times, so a step loses or reorders nothing in the store, but
// an auditor must be able to see that one happened and by how much.
type clockWatch struct {
	lastWall  time.Time
	lastMono  time.Duration
	started   bool
	tolerance time.Duration
}

// check takes the wall clock and a monotonic reading (time since a fixed
// start) and returns the step since the last call when it exceeds the
// tolerance.
func (c *clockWatch) check(wall time.Time, mono time.Duration) (time.Duration, bool) {
	if !c.started {
		c.lastWall, c.lastMono, c.started = wall, mono, true
		return 0, false
	}
	step := wall.Sub(c.lastWall) - (mono - c.lastMono)
	c.lastWall, c.lastMono = wall, mono
	if step > c.tolerance || step < -c.tolerance {
		return step, true
	}
	return 0, false
}

func (a auditLog) watchClock(ctx context.Context) {
	cw := clockWatch{tolerance: 2 * time.Second}
	origin := time.Now()
	t := time.NewTicker(time.Second)
	defer t.Stop()
	// Round(0) strips the monotonic reading, leaving the wall clock alone;
	// time.Since uses the monotonic one.
	cw.check(time.Now().Round(0), time.Since(origin))
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			if step, ok := cw.check(time.Now().Round(0), time.Since(origin)); ok {
				a.clockStepped(ctx, step)
			}
		}
	}
}

func (a auditLog) clockStepped(ctx context.Context, step time.Duration) {
	dir := "forward"
	if step < 0 {
		dir = "backward"
	}
	a.log.Warn("the wall clock stepped", "by", step, "direction", dir)
	a.record(ctx, store.AuditActorSystem, "clock-step", "system clock", fmt.Sprintf("wall clock stepped %s by %s", dir, step.Abs()), nil)
}

// auditJSON is one entry of GET /api/v1/audit.
type auditJSON struct {
	Seq     uint64    `json:"seq"`
	Time    time.Time `json:"time"`
	Actor   string    `json:"actor"`
	Action  string    `json:"action"`
	Subject string    `json:"subject"`
	Reason  string    `json:"reason"`
	// Detail is the entry's detail as text when it is text, else
	// DetailBase64 holds its bytes (the store's own encodings).
	Detail       string `json:"detail,omitempty"`
	DetailBase64 string `json:"detail_base64,omitempty"`
	Hash         string `json:"hash"`
}

func printable(b []byte) bool {
	if !utf8.Valid(b) {
		return false
	}
	for _, r := range string(b) {
		if !unicode.IsPrint(r) && r != '\n' && r != '\t' {
			return false
		}
	}
	return true
}

// auditReader is what the audit routes read.
type auditReader interface {
	ScanAudit(from, to uint64, fn func(store.AuditEntry) error) error
	AuditHead() (uint64, [32]byte, error)
}

// listAudit is GET /api/v1/audit?from=&to= (RFC 3339, default the last
// 24 h): the entries in that time range, in chain order, streamed. Readable
// with the viewer role: the trail holds who did what, not secrets, and an
// inspector must be able to read it without power to change anything.
func (s *server) listAudit(w http.ResponseWriter, r *http.Request) {
	ar, ok := s.store.(auditReader)
	if !ok {
		writeError(w, http.StatusServiceUnavailable, "no audit trail")
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	rs := newRowStream(w)
	err := ar.ScanAudit(0, 0, func(e store.AuditEntry) error {
		if e.Time.Before(from) || !e.Time.Before(to) {
			return r.Context().Err()
		}
		j := auditJSON{Seq: e.Seq, Time: e.Time.UTC(), Actor: e.Actor, Action: e.Action, Subject: e.Subject, Reason: e.Reason, Hash: hex.EncodeToString(e.Hash[:])}
		if printable(e.Detail) {
			j.Detail = string(e.Detail)
		} else {
			j.DetailBase64 = base64.StdEncoding.EncodeToString(e.Detail)
		}
		// Audit answers are small beside readings: encoding/json is fine.
		enc, err := json.Marshal(j)
		if err != nil {
			return err
		}
		return rs.row(func(b []byte) []byte { return append(b, enc...) })
	})
	if err != nil {
		rs.fail(err)
		return
	}
	rs.end()
}

// auditHead is GET /api/v1/audit/head: the chain's last sequence number
// and hash, for an outside system to keep.
func (s *server) auditHead(w http.ResponseWriter, r *http.Request) {
	ar, ok := s.store.(auditReader)
	if !ok {
		writeError(w, http.StatusServiceUnavailable, "no audit trail")
		return
	}
	seq, h, err := ar.AuditHead()
	if err != nil {
		writeError(w, errorStatus(err), err.Error())
		return
	}
	writeJSON(w, http.StatusOK, map[string]any{"seq": seq, "hash": hex.EncodeToString(h[:])})
}

// auditCollector exports the chain's length, so that a scrape history
// shows the trail only ever growing.
type auditCollector struct{ ar auditReader }

var descAuditSeq = prometheus.NewDesc("cleanmon_audit_entries", "Entries in the audit chain (its head's sequence number).", nil, nil)

func (c auditCollector) Describe(ch chan<- *prometheus.Desc) { ch <- descAuditSeq }

func (c auditCollector) Collect(ch chan<- prometheus.Metric) {
	if seq, _, err := c.ar.AuditHead(); err == nil {
		ch <- prometheus.MustNewConstMetric(descAuditSeq, prometheus.GaugeValue, float64(seq))
	}
}
