package peers

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"os"
	"os/exec"
	"runtime"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"
)

// measureLive posts the live shape, checks every reading is stored,
// stops the peer cleanly and measures its storage.
func measureLive(ctx context.Context, o Options, s server, w *workload, f *Figures, log io.Writer) error {
	d, err := postAll(ctx, w.live, o.Writers, s.write)
	if err != nil {
		return fmt.Errorf("live ingest: %w", err)
	}
	t0 := time.Now()
	if err := s.flush(ctx); err != nil {
		return err
	}
	f.IngestTime = d + time.Since(t0)
	f.Readings = w.liveCount
	f.ReadingsPerSecond = float64(w.liveCount) / f.IngestTime.Seconds()
	fmt.Fprintf(log, "peers: %s: %d readings in %s: %.0f readings/s\n", s.name(), w.liveCount, f.IngestTime.Round(time.Millisecond), f.ReadingsPerSecond)
	if err := checkCount(ctx, s, w.liveFrom, w.liveTo, w.liveCount); err != nil {
		return err
	}
	if err := s.stop(); err != nil {
		return err
	}
	if f.ApparentBytes, f.BytesOnDisk, f.BytesByDir, err = diskUsage(s.dataDir()); err != nil {
		return err
	}
	f.BytesPerReading = float64(f.BytesOnDisk) / float64(w.liveCount)
	fmt.Fprintf(log, "peers: %s: %d bytes allocated on disk after a clean stop (%d apparent; by directory %v): %.1f bytes/reading\n", s.name(), f.BytesOnDisk, f.ApparentBytes, f.BytesByDir, f.BytesPerReading)
	return nil
}

// measureYear loads pc-0's year into the restarted peer, checks the
// stored count of everything the run wrote, times the two queries and
// measures the storage again after a clean stop.
func measureYear(ctx context.Context, o Options, s server, w *workload, f *Figures, log io.Writer) error {
	d, err := postAll(ctx, w.year, o.Writers, s.write)
	if err != nil {
		return fmt.Errorf("year load: %w", err)
	}
	if err := s.flush(ctx); err != nil {
		return err
	}
	f.YearReadings = w.yearCount
	fmt.Fprintf(log, "peers: %s: year of %d readings loaded in %s\n", s.name(), w.yearCount, d.Round(time.Millisecond))
	if err := checkCount(ctx, s, min(w.yearFrom, w.liveFrom), max(w.yearTo, w.liveTo), w.liveCount+w.yearCount); err != nil {
		return fmt.Errorf("after restart and year: %w", err)
	}
	if f.YearRawRows, f.YearRaw, err = s.raw(ctx, w.yearFrom, w.yearTo); err != nil {
		return fmt.Errorf("year raw: %w", err)
	}
	if f.YearRawRows != w.yearCount {
		return fmt.Errorf("year raw: %d rows, want %d: %w", f.YearRawRows, w.yearCount, ErrCount)
	}
	if f.YearHourlyRows, f.YearHourly, err = s.hourly(ctx, w.yearFrom, w.yearTo); err != nil {
		return fmt.Errorf("year hourly: %w", err)
	}
	if want := (w.yearTo - w.yearFrom) / 3600; f.YearHourlyRows < want {
		return fmt.Errorf("year hourly: %d rows, want at least %d: %w", f.YearHourlyRows, want, ErrCount)
	}
	fmt.Fprintf(log, "peers: %s: year raw %d rows in %s, hourly %d rows in %s\n", s.name(), f.YearRawRows, f.YearRaw.Round(time.Microsecond), f.YearHourlyRows, f.YearHourly.Round(time.Microsecond))
	if err := s.stop(); err != nil {
		return err
	}
	if _, f.BytesOnDiskAll, _, err = diskUsage(s.dataDir()); err != nil {
		return err
	}
	f.BytesPerReadingAll = float64(f.BytesOnDiskAll) / float64(w.liveCount+w.yearCount)
	fmt.Fprintf(log, "peers: %s: with the year, %d bytes allocated after a clean stop: %.1f bytes/reading\n", s.name(), f.BytesOnDiskAll, f.BytesPerReadingAll)
	return nil
}

// checkCount asks the peer how many points of each channel it holds in
// [from, to] and compares with the readings sent.
func checkCount(ctx context.Context, s server, from, to, want int64) error {
	n, err := s.count(ctx, from, to)
	if err != nil {
		return fmt.Errorf("count: %w", err)
	}
	for i, c := range channels {
		if n[i] != want {
			return fmt.Errorf("channel %s: %d stored, %d sent: %w", c, n[i], want, ErrCount)
		}
	}
	return nil
}

// machine describes the host the figures come from.
func machine() string {
	model := "unknown CPU"
	if fh, err := os.Open("/proc/cpuinfo"); err == nil {
		sc := bufio.NewScanner(fh)
		for sc.Scan() {
			if k, v, ok := strings.Cut(sc.Text(), ":"); ok && strings.TrimSpace(k) == "model name" {
				model = strings.TrimSpace(v)
				break
			}
		}
		fh.Close()
	}
	return fmt.Sprintf("%d cores (%s), %s/%s", runtime.NumCPU(), model, runtime.GOOS, runtime.GOARCH)
}

func itoa64(n int64) string { return strconv.FormatInt(n, 10) }

// WriteTable prints the peers' figures side by side. When ours is not
// nil (cleanmon's figures by Figure) a cleanmon column and its ratio to
// each peer are added.
func (r Results) WriteTable(w io.Writer, ours map[Figure]float64) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	head := "figure\t"
	if ours != nil {
		head += "cleanmon\t"
	}
	for _, p := range r.Peers {
		head += p.Peer + "\t"
		if ours != nil {
			head += "ratio\t"
		}
	}
	fmt.Fprintln(tw, head)
	rows := []struct {
		label string
		f     Figure
		unit  func(float64) string
	}{
		{"readings/s (durable unless noted)", ReadingsPerSecond, func(v float64) string { return fmt.Sprintf("%.0f", v) }},
		{"bytes/reading on disk, clean stop", BytesPerReading, func(v float64) string { return fmt.Sprintf("%.1f", v) }},
		{"year raw, s", YearRawSeconds, func(v float64) string { return fmt.Sprintf("%.3f", v) }},
		{"year hourly, s", YearHourlySeconds, func(v float64) string { return fmt.Sprintf("%.4f", v) }},
	}
	for _, row := range rows {
		line := row.label + "\t"
		o, have := ours[row.f]
		if ours != nil {
			line += cell(have, o, row.unit) + "\t"
		}
		for _, p := range r.Peers {
			v, err := r.Get(p.Peer, row.f)
			line += cell(err == nil, v, row.unit) + "\t"
			if ours != nil {
				q, err := r.Ratio(p.Peer, row.f, o)
				line += cell(err == nil && have, q, func(v float64) string { return fmt.Sprintf("%.2f×", v) }) + "\t"
			}
		}
		fmt.Fprintln(tw, line)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, p := range r.Peers {
		if !p.Durable {
			if _, err := fmt.Fprintf(w, "%s acknowledges before its data is on disk: its readings/s is acknowledged and flushed to searchable memory, not durable.\n", p.Peer); err != nil {
				return err
			}
		}
	}
	return nil
}

// cell shows "—" for a figure not measured, never a zero that reads as
// a result.
func cell(ok bool, v float64, f func(float64) string) string {
	if !ok {
		return "—"
	}
	return f(v)
}

// packageVersion adds the Debian package version where dpkg knows it,
// for a binary that does not report its own; "" elsewhere.
func packageVersion(ctx context.Context, pkg string) string {
	ctx, cancel := context.WithTimeout(ctx, 5*time.Second)
	defer cancel()
	out, err := exec.CommandContext(ctx, "dpkg-query", "-W", "-f", "${Version}", pkg).Output()
	if err != nil || len(out) == 0 {
		return ""
	}
	return "; Debian package " + pkg + " " + strings.TrimSpace(string(out))
}
