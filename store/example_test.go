package store_test

import (
	"context"
	"fmt"
	"log"
	"os"
	"time"

	"cleanmon/store"
)

// A counter of the demo site's assembly room reports two one-minute
// samples; the daemon stores them, reads them back and looks at the hour.
func Example() {
	dir, err := os.MkdirTemp("", "cleanmon-example-")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(dir)

	s, err := store.Open(dir, store.Options{})
	if err != nil {
		log.Fatal(err)
	}
	defer s.Close()

	at := time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
	sample := func(t time.Time, ge05, ge5 uint64) store.Reading {
		return store.Reading{
			Counter: "pc-asm-1", Time: t, VolumeL: 28.3, FlowLPM: 28.3, Status: "ok",
			Sizes: []float64{0.5, 5}, Counts: []uint64{ge05, ge5},
		}
	}
	rs := []store.Reading{sample(at, 2830, 28), sample(at.Add(time.Minute), 5660, 0)}
	ctx := context.Background()
	acc, dup, err := s.AppendReadings(ctx, rs)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println("accepted", acc, "duplicates", dup)
	// Sent again (a retry after a lost acknowledgement): nothing doubles.
	acc, dup, _ = s.AppendReadings(ctx, rs)
	fmt.Println("accepted", acc, "duplicates", dup)

	_ = s.ScanReadings("pc-asm-1", at, at.Add(time.Hour), func(r store.Reading) error {
		per := r.PerM3()
		fmt.Printf("%s  ≥0.5 µm %.0f/m³  ≥5 µm %.0f/m³\n", r.Time.Format(time.RFC3339), per[0], per[1])
		return nil
	})
	_ = s.ScanRollups("pc-asm-1", time.Hour, time.Time{}, time.Time{}, func(r store.Rollup) error {
		fmt.Printf("hour from %s: %d samples, mean ≥0.5 µm %.0f/m³, max %.0f/m³\n",
			r.Start.Format("15:04"), r.Samples, r.Mean[0], r.Max[0])
		return nil
	})
	// Output:
	// accepted 2 duplicates 0
	// accepted 0 duplicates 2
	// 2026-03-02T10:00:00Z  ≥0.5 µm 100000/m³  ≥5 µm 989/m³
	// 2026-03-02T10:01:00Z  ≥0.5 µm 200000/m³  ≥5 µm 0/m³
	// hour from 10:00: 2 samples, mean ≥0.5 µm 150000/m³, max 200000/m³
}

// Verify checks a store file that no daemon has open, such as a backup.
func ExampleVerify() {
	dir, err := os.MkdirTemp("", "cleanmon-example-")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(dir)
	s, err := store.Open(dir, store.Options{})
	if err != nil {
		log.Fatal(err)
	}
	_ = s.SetOperatingState(context.Background(), store.OperatingState{Zone: "assembly", State: store.StateAtRest, By: "night shift"})
	_ = s.Close()

	problems, err := store.Verify(dir)
	fmt.Println(len(problems), "problems", err)
	// Output:
	// 0 problems <nil>
}

// An excursion alarm in the assembly room is raised and acknowledged;
// the webhook notifier delivers the first transition and fails the
// second, which waits for its retry.
func ExampleStore_RecordAlarms() {
	dir, err := os.MkdirTemp("", "cleanmon-example-")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(dir)
	s, err := store.Open(dir, store.Options{})
	if err != nil {
		log.Fatal(err)
	}
	defer s.Close()
	ctx := context.Background()
	at := time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
	raised := store.AlarmRecord{AlarmID: "assembly/excursion/pc-asm-1/0.5", Time: at,
		Snapshot: []byte(`{"state":"active"}`), Entry: []byte(`{"to":"active"}`)}
	acked := store.AlarmRecord{AlarmID: raised.AlarmID, Time: at.Add(4 * time.Minute), By: "shift-lead",
		Snapshot: []byte(`{"state":"acknowledged"}`), Entry: []byte(`{"to":"acknowledged"}`)}
	seqs, err := s.RecordAlarms(ctx, []store.AlarmRecord{raised, acked}, []string{"webhook", "log"})
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println("journal entries", seqs)

	due, _ := s.OutboxDue("webhook", at.Add(5*time.Minute), 10)
	_ = s.OutboxDone(ctx, due[0].ID)
	_ = s.OutboxRetry(ctx, due[1].ID, 1, at.Add(6*time.Minute), "503 Service Unavailable")
	due, _ = s.OutboxDue("webhook", at.Add(5*time.Minute), 10)
	fmt.Println("webhook due now", len(due))
	n, _ := s.OutboxLen("log")
	fmt.Println("log queue", n)

	_ = s.OpenAlarms(func(id string, snapshot []byte) error {
		fmt.Println("open", id, string(snapshot))
		return nil
	})
	_ = s.ScanAudit(0, 0, func(e store.AuditEntry) error {
		if e.Action == store.AuditAlarm {
			fmt.Println("audit", e.Seq, e.Action, e.Actor, e.Subject)
		}
		return nil
	})
	// Output:
	// journal entries [1 2]
	// webhook due now 0
	// log queue 2
	// open assembly/excursion/pc-asm-1/0.5 {"state":"acknowledged"}
	// audit 2 alarm-transition cleanmon assembly/excursion/pc-asm-1/0.5
	// audit 3 alarm-transition shift-lead assembly/excursion/pc-asm-1/0.5
}
