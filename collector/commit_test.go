package collector

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"testing"
	"time"
)

// submitAll runs one submission per element of raws at once and returns
// their results in the same order.
func submitAll(in *Ingest, raws [][]RawReading) ([]Result, []error) {
	res, errs := make([]Result, len(raws)), make([]error, len(raws))
	var wg sync.WaitGroup
	for i := range raws {
		wg.Go(func() { res[i], errs[i] = in.Pooled().SubmitReadings(context.Background(), raws[i]) })
	}
	wg.Wait()
	return res, errs
}

func coalesceRaw(counter string, minute int) RawReading {
	return RawReading{Counter: counter, Time: fmt.Sprintf("2026-03-02T10:%02d:00Z", minute), VolumeL: f64(28.3),
		Counts: map[string]Count{"0.5": {N: 310}, "1": {N: 80}, "5": {N: 2}}}
}

// Submissions inside one window are one commit of the sink; each caller
// gets the answer for its own readings, the observers see each stored
// reading once, and a reading two callers sent is stored once and a
// duplicate for one of them.
func TestCoalescedSubmissions(t *testing.T) {
	sink := newMemSink()
	// A window long enough that goroutines started together land in it
	// on a loaded machine too.
	in := newTestIngest(t, sink, IngestOptions{Coalesce: time.Second})
	var mu sync.Mutex
	seen := map[string]int{}
	in.OnReadings(func(rs []Reading) {
		mu.Lock()
		defer mu.Unlock()
		for _, r := range rs {
			seen[r.Counter+r.Time.Format("@15:04")]++
		}
	})
	raws := [][]RawReading{
		{coalesceRaw("pc-asm-1", 0)},
		{coalesceRaw("pc-asm-2", 0), coalesceRaw("pc-asm-2", 1)},
		{coalesceRaw("pc-asm-3", 0)},
		{coalesceRaw("pc-asm-1", 0)}, // the first caller's reading again
	}
	res, errs := submitAll(in, raws)
	accepted, dups := 0, 0
	for i := range res {
		if errs[i] != nil {
			t.Fatalf("submission %d: %v", i, errs[i])
		}
		if res[i].Accepted+res[i].Duplicates != len(raws[i]) {
			t.Errorf("submission %d: %+v for %d readings", i, res[i], len(raws[i]))
		}
		accepted, dups = accepted+res[i].Accepted, dups+res[i].Duplicates
	}
	if res[1].Accepted != 2 || res[2].Accepted != 1 || accepted != 4 || dups != 1 {
		t.Errorf("results %+v: want 4 accepted, the repeat of pc-asm-1 a duplicate", res)
	}
	if sink.commits != 1 {
		t.Errorf("%d commits of the sink, want the window's submissions in one", sink.commits)
	}
	for k, n := range seen {
		if n != 1 {
			t.Errorf("observers saw %s %d times", k, n)
		}
	}
	if len(seen) != 4 {
		t.Errorf("observers saw %v, want 4 readings", seen)
	}

	// A later window is a commit of its own; a resent reading is a
	// duplicate of the stored one.
	res, errs = submitAll(in, [][]RawReading{{coalesceRaw("pc-asm-1", 0)}, {coalesceRaw("pc-asm-1", 2)}})
	if errs[0] != nil || errs[1] != nil || res[0].Duplicates != 1 || res[1].Accepted != 1 || sink.commits != 2 {
		t.Errorf("second window: %+v %v, %d commits", res, errs, sink.commits)
	}
}

// A failed commit fails every caller of the window with ErrCommit, and
// stores nothing.
func TestCoalescedCommitFails(t *testing.T) {
	sink := newMemSink()
	sink.fail = errors.New("disk full")
	in := newTestIngest(t, sink, IngestOptions{Coalesce: 100 * time.Millisecond})
	_, errs := submitAll(in, [][]RawReading{{coalesceRaw("pc-asm-1", 0)}, {coalesceRaw("pc-asm-3", 0)}})
	for i, err := range errs {
		if !errors.Is(err, ErrCommit) {
			t.Errorf("submission %d: %v, want ErrCommit", i, err)
		}
	}
	if r, _ := sink.stored(); r != 0 {
		t.Errorf("%d readings stored", r)
	}
}

// An invalid submission is refused alone, at once: the others of its
// window are committed.
func TestCoalescedRefusalIsAlone(t *testing.T) {
	sink := newMemSink()
	in := newTestIngest(t, sink, IngestOptions{Coalesce: 100 * time.Millisecond})
	bad := coalesceRaw("pc-nowhere", 0)
	res, errs := submitAll(in, [][]RawReading{{coalesceRaw("pc-asm-1", 0)}, {bad}})
	var ie *InputError
	if errs[0] != nil || res[0].Accepted != 1 || !errors.As(errs[1], &ie) {
		t.Fatalf("results %+v %v: want the good one stored, the unknown counter refused", res, errs)
	}
}

// A caller that stops waiting gets its context's error at once.
func TestCoalescedCallerGivesUp(t *testing.T) {
	in := newTestIngest(t, newMemSink(), IngestOptions{Coalesce: time.Hour})
	ctx, cancel := context.WithTimeout(context.Background(), 50*time.Millisecond)
	defer cancel()
	if _, err := in.Pooled().SubmitReadings(ctx, []RawReading{coalesceRaw("pc-asm-1", 0)}); !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("got %v, want the deadline", err)
	}
}

// Requests, and submissions to the ingest itself, are not held for a
// window: each is its own commit.
func TestOnlyPooledIsCoalesced(t *testing.T) {
	sink := newMemSink()
	in := newTestIngest(t, sink, IngestOptions{Coalesce: time.Hour})
	for i := range 2 {
		body := fmt.Sprintf(`{"counter":"pc-asm-1","time":"2026-03-02T10:%02d:00Z","volume_l":28.3,"counts":{"0.5":310,"1":80,"5":2}}`, i)
		if _, err := in.PostReadings(context.Background(), "application/json", -1, strings.NewReader(body)); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := in.SubmitReadings(context.Background(), []RawReading{coalesceRaw("pc-asm-1", 5)}); err != nil {
		t.Fatal(err)
	}
	if sink.commits != 3 {
		t.Errorf("%d commits, want one per request and submission", sink.commits)
	}
}

// DP and environment submissions are gathered the same way.
func TestCoalescedSamples(t *testing.T) {
	sink := newMemSink()
	in := newTestIngest(t, sink, IngestOptions{Coalesce: time.Second})
	var wg sync.WaitGroup
	errs := make([]error, 3)
	for i, s := range []string{"dp-asm-gown", "dp-hood-asm", "dp-asm-gown"} {
		wg.Go(func() {
			_, errs[i] = in.Pooled().SubmitPressure(context.Background(), []RawPressure{{Sensor: s, Time: "2026-03-02T10:00:00Z", Pa: f64(12)}})
		})
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			t.Fatal(err)
		}
	}
	if _, p := sink.stored(); p != 2 || sink.commits != 1 {
		t.Errorf("%d DP samples in %d commits, want 2 in 1", p, sink.commits)
	}

	env := newMemEnvSink()
	ei := NewEnvironmentIngest(demoEnvRegistry(t), env, IngestOptions{Now: func() time.Time { return testNow }, Coalesce: time.Second})
	for i, s := range []string{"av-hood", "th-asm"} {
		wg.Go(func() {
			raw := RawEnvironment{Sensor: s, Time: "2026-03-02T10:00:00Z"}
			if s == "av-hood" {
				raw.VelocityMS = f64(0.4)
			} else {
				raw.TemperatureC, raw.HumidityPct = f64(21), f64(45)
			}
			_, errs[i] = ei.Pooled().SubmitEnvironment(context.Background(), []RawEnvironment{raw})
		})
	}
	wg.Wait()
	if errs[0] != nil || errs[1] != nil || env.len() != 2 || env.commits != 1 {
		t.Errorf("environment: %v %v, %d samples in %d commits", errs[0], errs[1], env.len(), env.commits)
	}
}

// Eight DP sensors polled every second over real Modbus TCP, through the
// pooled ingest with a one-second window: their samples reach the sink in
// far fewer commits than samples (one each without pooling), every sample
// once.
func TestPolledSensorsShareCommits(t *testing.T) {
	var ss []Sensor
	for i := range 8 {
		s := mbSensor()
		s.ID, s.Modbus.Address = fmt.Sprintf("dp-mb-%d", i), ""
		ss = append(ss, s)
	}
	r := newRigPooled(t, nil, ss, PollerOptions{}, time.Second)
	for id, sl := range r.slaves {
		if err := sl.PublishPressure(12.5); err != nil {
			t.Fatalf("%s: %v", id, err)
		}
	}
	waitFor(t, 20*time.Second, "24 DP samples stored", func() bool { _, p := r.sink.stored(); return p >= 24 })
	r.stop()
	_, samples := r.sink.stored()
	r.sink.mu.Lock()
	commits := r.sink.commits
	r.sink.mu.Unlock()
	// The polls fall on the same second boundaries and pool into one
	// commit each (one a sample without pooling); a poll that misses its
	// window on a loaded machine makes a commit of its own, so the bound
	// leaves room for that.
	if commits*2 > samples {
		t.Errorf("%d samples in %d commits, want at least two samples a commit", samples, commits)
	}
	t.Logf("%d samples of 8 sensors in %d commits", samples, commits)
}

// Polls fall on multiples of their period on the clock, so devices of
// one period poll together.
func TestUntilNextPoll(t *testing.T) {
	at := time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
	cases := []struct {
		now    time.Time
		period time.Duration
		want   time.Duration
	}{
		{at, 10 * time.Second, 10 * time.Second}, // on a boundary: the next one
		{at.Add(3700 * time.Millisecond), 10 * time.Second, 6300 * time.Millisecond},
		{at.Add(59 * time.Second), time.Minute, time.Second},
		{at.Add(4999 * time.Millisecond), 5 * time.Second, time.Millisecond},
		{at, 0, 0},
	}
	for _, tc := range cases {
		if got := untilNextPoll(tc.now, tc.period); got != tc.want {
			t.Errorf("untilNextPoll(%s, %s) = %s, want %s", tc.now.Format("15:04:05.000"), tc.period, got, tc.want)
		}
	}
}
