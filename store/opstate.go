package store

import (
	"context"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Operating states of a zone (ISO 14644-1 occupancy states, plus
// maintenance, during which readings are kept but raise no excursions).
const (
	StateAtRest      = "at-rest"
	StateInOperation = "in-operation"
	StateMaintenance = "maintenance"
)

// OperatingState is one change of a zone's operating state: who made it,
// why, and when it took effect.
type OperatingState struct {
	Zone, State, By, Reason string
	Time                    time.Time
}

func checkOpState(st *OperatingState) (field, reason string) {
	if why := checkName(st.Zone); why != "" {
		return "Zone", why
	}
	switch st.State {
	case StateAtRest, StateInOperation, StateMaintenance:
	default:
		return "State", fmt.Sprintf("%q is not one of %s, %s, %s", st.State, StateAtRest, StateInOperation, StateMaintenance)
	}
	if len(st.By) > maxNameLen {
		return "By", fmt.Sprintf("%d bytes, more than %d", len(st.By), maxNameLen)
	}
	if len(st.Reason) > maxReasonLen {
		return "Reason", fmt.Sprintf("%d bytes, more than %d", len(st.Reason), maxReasonLen)
	}
	if why := checkTime(st.Time); why != "" {
		return "Time", why
	}
	return "", ""
}

// SetOperatingState records a change durably, with its AuditOpState
// entry (Actor By, or AuditActorSystem when By is empty). A zero Time
// means now. The
// history keeps every change in the order recorded; the last recorded
// change is the zone's state, whatever its Time says.
func (s *Store) SetOperatingState(ctx context.Context, st OperatingState) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	if st.Time.IsZero() {
		st.Time = time.Now()
	}
	st.Time = st.Time.UTC()
	if field, reason := checkOpState(&st); field != "" {
		return &RecordError{Kind: "operating state", Index: 0, Field: field, Reason: reason}
	}
	return s.submit(ctx, 1, func(tx *bolt.Tx) error {
		b, err := newSeriesBuckets(tx, bucketOpState).get(st.Zone)
		if err != nil {
			return err
		}
		seq, err := b.NextSequence()
		if err != nil {
			return err
		}
		key := nanosKey(int64(seq))
		val := encodeOpState(key, &st)
		if err := b.Put(key, val); err != nil {
			return err
		}
		cov := newCoverage(coverOpState)
		cov.add(st.Zone, key, val)
		_, _, err = appendAudit(tx, &AuditEntry{
			Time: st.Time, Actor: actorOrSystem(st.By), Action: AuditOpState,
			Subject: st.Zone + ": " + st.State, Reason: st.Reason, Detail: cov.detail(),
		})
		return err
	})
}

// OperatingStates returns the latest state of every zone that has one.
func (s *Store) OperatingStates() (map[string]OperatingState, error) {
	if err := s.enter(); err != nil {
		return nil, err
	}
	defer s.exit()
	out := map[string]OperatingState{}
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		root := tx.Bucket(bucketOpState)
		return root.ForEachBucket(func(name []byte) error {
			k, v := root.Bucket(name).Cursor().Last()
			if k == nil {
				return nil
			}
			st, err := decodeOpState(string(name), k, v)
			if err != nil {
				return err
			}
			out[st.Zone] = st
			return nil
		})
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// OperatingStateHistory calls fn with every recorded change of zone,
// oldest first; an error from fn stops it and is returned.
func (s *Store) OperatingStateHistory(zone string, fn func(OperatingState) error) error {
	return scanSeries(s, bucketOpState, zone, time.Time{}, time.Time{}, decodeOpState, fn)
}
