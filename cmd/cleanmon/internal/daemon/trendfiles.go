package daemon

import (
	"time"

	"cleanmon/cmd/cleanmon/internal/web"
)

// trendRetry is how long the monthly reports wait after a failure before
// they try again.
const trendRetry = time.Hour

// startTrendFiles writes, when reports.trend_dir is set, each zone's last
// month into it: at start when its files are missing, then on the first
// day of every month a few minutes after midnight UTC. Its stop is the
// background context's, already on the stop stack.
func (d *Daemon) startTrendFiles() {
	dir := d.cfg.Reports.TrendDir
	if dir == "" {
		return
	}
	var zones []string
	for _, z := range d.cfg.Zones {
		if len(z.Locations) > 0 {
			zones = append(zones, z.ID)
		}
	}
	d.wg.Add(1)
	go func() {
		defer d.wg.Done()
		for {
			now := d.now().UTC()
			month := time.Date(now.Year(), now.Month(), 1, 0, 0, 0, 0, time.UTC).AddDate(0, -1, 0).Format("2006-01")
			files, err := web.WriteTrendFiles(d.bg, dir, d.api, zones, month)
			next := time.Date(now.Year(), now.Month(), 1, 0, 5, 0, 0, time.UTC).AddDate(0, 1, 0)
			if err != nil {
				d.log.Error("monthly trend reports not written", "dir", dir, "month", month, "err", err)
				next = now.Add(trendRetry)
			} else if len(files) > 0 {
				d.log.Info("monthly trend reports written", "dir", dir, "month", month, "files", len(files))
			}
			// The wait is in wall time; with a demo's faster clock the
			// next month comes sooner in proportion.
			wait := time.Duration(float64(next.Sub(now)) / d.o.Speed)
			t := time.NewTimer(max(wait, time.Second))
			select {
			case <-d.bg.Done():
				t.Stop()
				return
			case <-t.C:
			}
		}
	}()
}
