package daemon

import (
	"context"
	"encoding/hex"
	"fmt"
	"log/slog"
	"time"

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
