package alerts

import (
	"sort"
	"time"
)

// DefaultCleanUp is the clean-up period after a switch to at-rest: EU GMP
// Annex 1 (2022) gives 15–20 minutes as guidance for reaching the at-rest
// state after operations end (from memory).
const DefaultCleanUp = 20 * time.Minute

// StateAt is the operating state of a zone at one instant, as the rules
// judge a reading taken then.
type StateAt struct {
	// Operating is the state set (at-rest, in-operation, maintenance).
	Operating string
	// Limits is the state whose limits apply: Operating, except during a
	// clean-up period and in maintenance, where it is the state before.
	Limits string
	// Judged is false in maintenance: readings are kept but neither
	// judged nor used for classification.
	Judged bool
	// Since is when the Limits regime began (the end of the clean-up for
	// at-rest): a rolling mean never mixes readings of two regimes. Zero
	// when it is the configured state from the start.
	Since time.Time
	// CleanUpUntil is set while a clean-up period runs.
	CleanUpUntil time.Time
}

// OperatingAt tells which operating state, and whose limits, applied to a
// zone at a time: initial is the configured state, history the recorded
// changes (any order), cleanUp the zone's clean-up period (0:
// DefaultCleanUp). It serves the live judgement and the classification of
// stored readings alike, so both judge a reading by the state of its time.
func OperatingAt(initial string, history []OperatingChange, cleanUp time.Duration, at time.Time) StateAt {
	if cleanUp <= 0 {
		cleanUp = DefaultCleanUp
	}
	hs := sortedChanges(history)
	st := StateAt{Operating: initial, Limits: initial, Judged: initial != Maintenance}
	for i, ch := range hs {
		if ch.Time.After(at) {
			break
		}
		// A change is seen as it stood until the next one (or at).
		until := at
		if i+1 < len(hs) && !hs[i+1].Time.After(at) {
			until = hs[i+1].Time
		}
		st = next(st, ch, cleanUp, until)
	}
	return st
}

// next applies one change (at or before at) to the state before it.
func next(prev StateAt, ch OperatingChange, cleanUp time.Duration, at time.Time) StateAt {
	if ch.State == prev.Operating {
		return prev
	}
	st := StateAt{Operating: ch.State, Judged: ch.State != Maintenance}
	switch {
	case ch.State == Maintenance:
		st.Limits, st.Since, st.CleanUpUntil = prev.Limits, prev.Since, prev.CleanUpUntil
		if !st.CleanUpUntil.After(at) {
			st.CleanUpUntil = time.Time{}
		}
	case ch.State == AtRest:
		end := ch.Time.Add(cleanUp)
		if at.Before(end) {
			// Judged as before until the room has had time to clean up.
			st.Limits, st.Since, st.CleanUpUntil = prev.Limits, prev.Since, end
		} else {
			st.Limits, st.Since = AtRest, end
		}
	default:
		st.Limits, st.Since = ch.State, ch.Time
	}
	return st
}

func sortedChanges(h []OperatingChange) []OperatingChange {
	if sort.SliceIsSorted(h, func(i, j int) bool { return h[i].Time.Before(h[j].Time) }) {
		return h
	}
	out := append([]OperatingChange(nil), h...)
	sort.SliceStable(out, func(i, j int) bool { return out[i].Time.Before(out[j].Time) })
	return out
}
