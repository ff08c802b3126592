package daemon

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"time"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/collector"
	"cleanmon/store"
)

// errReadOnly: the offline judge observes nothing, so it never has a
// transition to record; one would be a fault of the caller.
var errReadOnly = errors.New("the offline judge records no alarm transitions")

// readOnlyJournal reads the open alarms of a store and records nothing.
type readOnlyJournal struct{ alarmStore }

// RecordTransitions implements alerts.Journal: refused.
func (readOnlyJournal) RecordTransitions(context.Context, []alerts.Transition, []string) error {
	return errReadOnly
}

var _ alerts.Journal = readOnlyJournal{}

// OfflineJudge is the judge of a site over a store that no daemon holds,
// for the commands that read a store directly (report trend): it knows
// the operating-state history and the open alarms on record, so stored
// readings are judged by the state of their time, exactly as a running
// daemon judges them; it takes no live data and records nothing.
func OfflineJudge(cfg *site.Config, st *store.Store, now func() time.Time) (*alerts.Judge, error) {
	reg, err := collector.NewRegistry(cfg.Counters, cfg.PressureSensors)
	if err != nil {
		return nil, asUsage(err)
	}
	j, err := alerts.NewJudge(engineConfig(cfg, reg, nil), readOnlyJournal{alarmStore{st}}, now)
	if err != nil {
		return nil, asUsage(err)
	}
	changes, _, err := storedHistory(st, cfg, now(), slog.New(slog.NewTextHandler(io.Discard, nil)))
	if err != nil {
		return nil, fmt.Errorf("reading the operating-state history: %w", err)
	}
	if err := j.Restore(context.Background(), changes); err != nil {
		return nil, err
	}
	return j, nil
}
