package collector_test

import (
	"context"
	"fmt"
	"time"

	"cleanmon/collector"
)

// printSink stands in for the store of the daemon.
type printSink struct{}

func (printSink) CommitReadings(_ context.Context, rs []collector.Reading) ([]bool, error) {
	return everyOne(len(rs)), nil
}

func (printSink) CommitPressure(_ context.Context, ps []collector.Pressure) ([]bool, error) {
	return everyOne(len(ps)), nil
}

// everyOne marks n samples all stored.
func everyOne(n int) []bool {
	stored := make([]bool, n)
	for i := range stored {
		stored[i] = true
	}
	return stored
}

func ExampleIngest_SubmitReadings() {
	reg, err := collector.NewRegistry([]collector.Counter{
		{ID: "pc-met", Zone: "metrology", FlowLPM: 2.83, Sizes: []string{"0.5", "5"}, Mode: collector.ModeDifferential},
	}, nil)
	if err != nil {
		panic(err)
	}
	now := time.Date(2026, 3, 2, 10, 1, 0, 0, time.UTC)
	in := collector.NewIngest(reg, printSink{}, collector.IngestOptions{Now: func() time.Time { return now }})
	in.OnReadings(func(rs []collector.Reading) {
		for _, r := range rs {
			fmt.Printf("%s %s: ≥0.5 µm %.0f /m³, ≥5 µm %.0f /m³\n", r.Counter, r.Time.Format(time.RFC3339), r.PerM3[0], r.PerM3[1])
		}
	})
	vol := 2.83
	res, err := in.SubmitReadings(context.Background(), []collector.RawReading{{
		Counter: "pc-met", Time: "2026-03-02T11:00:00+01:00", VolumeL: &vol,
		// Differential: 95 particles in 0.5–5 µm, 5 at ≥5 µm.
		Counts: map[string]collector.Count{"0.5um": {N: 95}, "5um": {N: 5}},
	}})
	fmt.Println(res, err)

	vol = 0
	_, err = in.SubmitReadings(context.Background(), []collector.RawReading{{Counter: "pc-met", Time: "2026-03-02T10:00:00Z", VolumeL: &vol}})
	fmt.Println(err)
	// Output:
	// pc-met 2026-03-02T10:00:00Z: ≥0.5 µm 35336 /m³, ≥5 µm 1767 /m³
	// {1 0} <nil>
	// element 0, volume_l: 0 L: the sampled volume must be a finite number of litres > 0 [rule volume-positive]
}

func ExampleSimulator_Backfill() {
	reg, err := collector.NewRegistry(
		[]collector.Counter{{ID: "pc-gown", Zone: "gowning", Sizes: []string{"0.5", "5"}}},
		[]collector.Sensor{{ID: "dp-gown", High: "gowning", Low: "corridor", MinPa: 8}},
	)
	if err != nil {
		panic(err)
	}
	// ISO 8 limits, ISO 14644-1:2015 Table 1.
	limits := map[string]map[float64]float64{"pc-gown": {0.5: 3520000, 5: 29300}}
	sim, err := collector.NewSimulator(reg, limits, collector.SimOptions{Seed: 1})
	if err != nil {
		panic(err)
	}
	from := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	for b := range sim.Backfill(from, from.Add(2*time.Hour), time.Hour) {
		fmt.Printf("%s–%s: %d readings, %d DP samples\n", b.From.Format("15:04"), b.To.Format("15:04"), len(b.Readings), len(b.Pressure))
	}
	// One reading a minute, one DP sample every 10 s; in the second hour
	// the counter drops out for three samples.

	// Output:
	// 00:00–01:00: 60 readings, 360 DP samples
	// 01:00–02:00: 57 readings, 360 DP samples
}
