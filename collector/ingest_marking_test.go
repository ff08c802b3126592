package collector

import (
	"context"
	"testing"
)

// Observers see only the readings a request stored:
// a resent reading feeds no rule and no metric twice.
func TestObserversSeeOnlyNewReadings(t *testing.T) {
	in := newTestIngest(t, newMemSink(), IngestOptions{})
	var seen [][]string
	in.OnReadings(func(rs []Reading) {
		var ids []string
		for _, r := range rs {
			ids = append(ids, r.Counter+"@"+r.Time.Format("15:04"))
		}
		seen = append(seen, ids)
	})
	raw := func(counter, tm string) RawReading {
		return RawReading{Counter: counter, Time: tm, VolumeL: f64(28.3), Counts: map[string]Count{"0.5": {N: 310}, "1": {N: 80}, "5": {N: 2}}}
	}
	ctx := context.Background()
	if _, err := in.SubmitReadings(ctx, []RawReading{raw("pc-asm-1", "2026-03-02T10:00:00Z"), raw("pc-asm-2", "2026-03-02T10:00:00Z")}); err != nil {
		t.Fatal(err)
	}
	res, err := in.SubmitReadings(ctx, []RawReading{raw("pc-asm-1", "2026-03-02T10:00:00Z"), raw("pc-asm-1", "2026-03-02T10:01:00Z")})
	if err != nil {
		t.Fatal(err)
	}
	if res.Accepted != 1 || res.Duplicates != 1 {
		t.Errorf("result %+v, want 1 accepted and 1 duplicate", res)
	}
	if len(seen) != 2 || len(seen[1]) != 1 || seen[1][0] != "pc-asm-1@10:01" {
		t.Errorf("observers saw %v, want the resent reading left out", seen)
	}
}
