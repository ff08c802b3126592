package loadtest

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"sync"
	"time"

	"cleanmon/cmd/cleanmon/internal/loadtest/peers"
	"cleanmon/store"
)

// ShapeOptions are the knobs of the side-by-side measurement: the live
// shape (Counters counters, one reading a minute each for Minutes minutes,
// posted in time order across counters in batches of Batch by Writers),
// then one location's year of YearMinutes readings posted as a gateway
// catching up would (its backlog in time order, the same batches).
type ShapeOptions struct {
	Counters, Minutes, YearMinutes, Batch, Writers int
	Peers                                          bool // run InfluxDB and VictoriaMetrics on the same readings, in the same run
	Keep                                           bool
}

// ShapeFigures are cleanmon's figures of one shape run.
type ShapeFigures struct {
	LiveReadings, YearReadings int64
	LivePerSecond              float64 // durable readings/s, live shape
	CatchUpPerSecond           float64 // durable readings/s, the year posted as a backlog
	BytesAtStop                int64   // allocated blocks of the store after a clean stop, live shape only
	BytesCompacted             int64   // the same after `cleanmon compact`
	VerifyPerSecond            float64 // readings/s of store.Verify over the live shape
	YearRaw, YearHourly        time.Duration
	YearRawRows, YearHourRows  int
}

// BytesPerReading is BytesAtStop per live reading.
func (f ShapeFigures) BytesPerReading() float64 {
	return float64(f.BytesAtStop) / float64(f.LiveReadings)
}

// shapeBatches turns the peers' readings into cleanmon's NDJSON batches:
// the same counters (pc-0 the year's location), times and cumulative
// counts.
func shapeBatches(po peers.Options, batch int) (live, year [][]byte, err error) {
	var cur bytes.Buffer
	n := 0
	add := func(out *[][]byte, r peers.Reading) {
		cur.WriteString(`{"counter":"pc-`)
		cur.WriteString(strconv.Itoa(r.Counter))
		cur.WriteString(`","time":"`)
		cur.WriteString(r.Time.Format(time.RFC3339))
		cur.WriteString(`","volume_l":28.3,"flow_lpm":28.3,"status":"ok","counts":{`)
		for i, sz := range peers.Sizes {
			if i > 0 {
				cur.WriteByte(',')
			}
			cur.WriteString(`"` + sz + `":`)
			cur.WriteString(strconv.FormatInt(r.Counts[i], 10))
		}
		cur.WriteString("}}\n")
		if n++; n == batch {
			*out = append(*out, bytes.Clone(cur.Bytes()))
			cur.Reset()
			n = 0
		}
	}
	flush := func(out *[][]byte) {
		if n > 0 {
			*out = append(*out, bytes.Clone(cur.Bytes()))
			cur.Reset()
			n = 0
		}
	}
	inYear := false
	err = peers.Readings(po,
		func(r peers.Reading) { add(&live, r) },
		func(r peers.Reading) {
			if !inYear {
				flush(&live)
				inYear = true
			}
			add(&year, r)
		})
	if inYear {
		flush(&year)
	} else {
		flush(&live)
	}
	return live, year, err
}

// postAll posts every batch, in order, by writers taking the next batch
// as each finishes, and returns the readings/s from the first request to
// the last acknowledgement (each acknowledged after its fsync).
func (c *benchClient) postAll(batches [][]byte, writers int, readings int64) (float64, error) {
	next := make(chan []byte)
	errs := make(chan error, writers)
	var wg sync.WaitGroup
	begin := time.Now()
	for range writers {
		wg.Go(func() {
			for b := range next {
				if err := c.post(context.Background(), b); err != nil {
					errs <- err
					for range next { // drain, so the feeder ends
					}
					return
				}
			}
		})
	}
	for _, b := range batches {
		next <- b
	}
	close(next)
	wg.Wait()
	took := time.Since(begin)
	select {
	case err := <-errs:
		return 0, err
	default:
	}
	return float64(readings) / took.Seconds(), nil
}

// Shape runs the side-by-side measurement of cleanmon (the real daemon,
// this binary, over HTTP on loopback) and, with o.Peers, of InfluxDB and
// VictoriaMetrics on the very same readings, and prints the figures and
// their ratios.
func Shape(o ShapeOptions, stdout, stderr io.Writer) (ShapeFigures, error) {
	var f ShapeFigures
	po := peers.Options{Counters: o.Counters, Minutes: o.Minutes, Batch: o.Batch, Writers: o.Writers,
		Year: o.YearMinutes > 0, YearMinutes: o.YearMinutes, End: time.Now().UTC().Add(-time.Hour).Truncate(time.Minute)}
	live, year, err := shapeBatches(po, o.Batch)
	if err != nil {
		return f, err
	}
	f.LiveReadings, f.YearReadings = int64(o.Counters*o.Minutes), int64(o.YearMinutes)
	dir, err := os.MkdirTemp("", "cleanmon-shape-")
	if err != nil {
		return f, err
	}
	if !o.Keep {
		defer os.RemoveAll(dir)
	} else {
		fmt.Fprintf(stderr, "cleanmon bench: keeping %s\n", dir)
	}
	fmt.Fprintf(stdout, "cleanmon bench: %d counters × %d minutes (live shape, batches of %d by %d writers), one location's year of %d minutes; on %s\n",
		o.Counters, o.Minutes, o.Batch, o.Writers, o.YearMinutes, machine())
	if err := shapeOurs(o, dir, live, year, po, &f, stdout); err != nil {
		return f, err
	}
	if !o.Peers {
		return f, nil
	}
	res, err := peers.Run(context.Background(), po, stderr)
	if err != nil {
		return f, fmt.Errorf("peers: %w", err)
	}
	ours := map[peers.Figure]float64{
		peers.ReadingsPerSecond: f.LivePerSecond,
		peers.BytesPerReading:   f.BytesPerReading(),
	}
	if o.YearMinutes > 0 {
		ours[peers.YearRawSeconds] = f.YearRaw.Seconds()
		ours[peers.YearHourlySeconds] = f.YearHourly.Seconds()
	}
	fmt.Fprintln(stdout, "side by side, the same readings (ratio: cleanmon's figure over the peer's; > 1 is better for readings/s, < 1 for bytes and seconds):")
	return f, res.WriteTable(stdout, ours)
}

// stopLimit bounds a clean stop of the daemon: it compacts the head
// left at the stop, a few seconds at most on the live shape.
const stopLimit = 10 * time.Minute

// shapeOurs measures cleanmon: live shape, clean stop, disk, verify,
// offline compaction; restart, the year as a catch-up backlog, the two
// year queries, clean stop.
func shapeOurs(o ShapeOptions, dir string, live, year [][]byte, po peers.Options, f *ShapeFigures, stdout io.Writer) error {
	cfg := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(cfg, []byte(benchSite(o.Counters+1)), 0o600); err != nil {
		return err
	}
	self, err := os.Executable()
	if err != nil {
		return err
	}
	data := filepath.Join(dir, "data")
	start := func() (*Child, *benchClient, error) {
		srv, err := StartChild(self, "serve", "--config", cfg, "--data", data, "--listen", "127.0.0.1:0")
		if err != nil {
			return nil, nil, err
		}
		return srv, &benchClient{url: srv.URL, http: &http.Client{Transport: &http.Transport{MaxIdleConnsPerHost: 64}}}, nil
	}
	srv, c, err := start()
	if err != nil {
		return err
	}
	f.LivePerSecond, err = c.postAll(live, o.Writers, f.LiveReadings)
	if err != nil {
		srv.Kill()
		return err
	}
	if !srv.StopWithin(stopLimit) {
		return errors.New("the daemon did not stop within " + stopLimit.String())
	}
	if f.BytesAtStop, err = store.AllocatedBytes(data); err != nil {
		return err
	}
	begin := time.Now()
	problems, err := store.Verify(data)
	if err != nil || len(problems) > 0 {
		return fmt.Errorf("verify after the live shape: %v %q", err, problems)
	}
	f.VerifyPerSecond = float64(f.LiveReadings) / time.Since(begin).Seconds()
	cr, err := store.CompactFile(data, time.Second)
	if err != nil {
		return err
	}
	f.BytesCompacted = cr.After
	fmt.Fprintf(stdout, "  live shape: %.0f readings/s durable (acknowledged after fsync)\n", f.LivePerSecond)
	fmt.Fprintf(stdout, "  on disk after a clean stop: %.1f bytes/reading (allocated blocks of the store file); after cleanmon compact: %.1f\n",
		f.BytesPerReading(), float64(f.BytesCompacted)/float64(f.LiveReadings))
	fmt.Fprintf(stdout, "  verify: %.0f readings/s\n", f.VerifyPerSecond)
	if len(year) == 0 {
		return nil
	}
	if srv, c, err = start(); err != nil {
		return err
	}
	defer func() {
		if !srv.StopWithin(stopLimit) {
			fmt.Fprintln(stdout, "  (the daemon had to be killed at the end)")
		}
	}()
	if f.CatchUpPerSecond, err = c.postAll(year, o.Writers, f.YearReadings); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "  catch-up shape (one location's backlog in time order): %.0f readings/s durable\n", f.CatchUpPerSecond)
	from := po.End.Add(-time.Duration(o.YearMinutes) * time.Minute)
	q := fmt.Sprintf("%s/api/v1/zones/assembly/readings?location=loc-0&from=%s&to=%s", c.url, from.Format(time.RFC3339), po.End.Format(time.RFC3339))
	if f.YearRaw, f.YearRawRows, err = c.timeQuery(q); err != nil {
		return err
	}
	if f.YearHourly, f.YearHourRows, err = c.timeQuery(q + "&step=1h"); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "  one location's year: raw %d rows in %.3f s; hourly %d rows in %.4f s\n",
		f.YearRawRows, f.YearRaw.Seconds(), f.YearHourRows, f.YearHourly.Seconds())
	return nil
}
