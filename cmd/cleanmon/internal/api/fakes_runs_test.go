package api

import (
	"context"
	"time"

	"cleanmon/store"
)

// The run and state-history methods of fakeStore: no runs, no history.
// Tests of these routes run on a real store (cmd/cleanmon).

func (fakeStore) CreateRuns(context.Context, []store.Run, string) error { return nil }
func (fakeStore) CloseRun(_ context.Context, id string, _ time.Time, _ string) (store.Run, error) {
	return store.Run{}, store.ErrNotFound
}
func (fakeStore) Run(string) (store.Run, error)                                        { return store.Run{}, store.ErrNotFound }
func (fakeStore) Runs(string, time.Time, time.Time) ([]store.Run, error)               { return nil, nil }
func (fakeStore) OperatingStateHistory(string, func(store.OperatingState) error) error { return nil }
