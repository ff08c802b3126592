package alerts

import (
	"context"
	"fmt"
	"time"
)

// KindIntegrity is the alarm of a store found damaged or rewritten: the
// record an auditor relies on can no longer be trusted, so it is an action
// alarm of the whole site (no zone).
const KindIntegrity = "integrity"

// ObserveIntegrity judges the store's integrity check: fault set raises
// (or keeps) the site's integrity action alarm with reason as its message;
// fault false lets it clear. It latches like every action alarm, so a
// person acknowledges what was found even when a later check passes.
func (e *Engine) ObserveIntegrity(ctx context.Context, fault bool, reason string, at time.Time) error {
	if at.IsZero() {
		return fmt.Errorf("%w: integrity: time: missing", ErrObservation)
	}
	e.mu.Lock()
	e.touched = true
	t := e.begin()
	a := Alarm{Kind: KindIntegrity, Message: reason}
	if !fault {
		a.Message = "the store's integrity check passes again"
	}
	t.judge(condition{key: ":" + KindIntegrity, present: fault, level: LevelAction, tmpl: a, since: at, at: at})
	return e.finish(ctx, t)
}
