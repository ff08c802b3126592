package peers

import (
	"bytes"
	"context"
	"flag"
	"os"
	"testing"
	"time"
)

var (
	benchCounters = flag.Int("peers.counters", 200, "live-shape counters of BenchmarkPeers")
	benchMinutes  = flag.Int("peers.minutes", 5000, "per-minute readings of each counter in BenchmarkPeers")
	benchYear     = flag.Int("peers.year", 525600, "minutes of the one-location year in BenchmarkPeers (0: no year)")
	benchKeep     = flag.Bool("peers.keep", false, "keep the peers' temporary directories")
)

// BenchmarkPeers runs the full peer measurement once per iteration and
// reports each peer's figures as metrics; the log and the side-by-side
// table go to the test log. Run it with -benchtime=1x.
func BenchmarkPeers(b *testing.B) {
	if missing := Available(); len(missing) > 0 {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			b.Fatalf("missing %v and CLEANMON_REQUIRE_TOOLS is set", missing)
		}
		b.Skipf("missing %v", missing)
	}
	o := Options{Counters: *benchCounters, Minutes: *benchMinutes, Year: *benchYear > 0, YearMinutes: *benchYear, Keep: *benchKeep}
	for i := 0; i < b.N; i++ {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Minute)
		var log bytes.Buffer
		res, err := Run(ctx, o, &log)
		cancel()
		if err != nil {
			b.Fatalf("%v\n%s", err, log.String())
		}
		var table bytes.Buffer
		if err := res.WriteTable(&table, nil); err != nil {
			b.Fatal(err)
		}
		b.Logf("%s\n%s\n%s", res.Machine, log.String(), table.String())
		for _, p := range res.Peers {
			b.ReportMetric(p.ReadingsPerSecond, p.Peer+"-readings/s")
			b.ReportMetric(p.BytesPerReading, p.Peer+"-B/reading")
			if o.Year {
				b.ReportMetric(p.YearRaw.Seconds(), p.Peer+"-year-raw-s")
				b.ReportMetric(p.YearHourly.Seconds(), p.Peer+"-year-hourly-s")
			}
		}
	}
}
