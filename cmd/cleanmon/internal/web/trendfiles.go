package web

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"os"
	"path/filepath"

	"cleanmon/cmd/cleanmon/internal/report"
)

// WriteTrendFiles writes the month (YYYY-MM) of each zone into dir as
// trend-ZONE-MONTH.html and .pdf, each written to a temporary file and
// renamed, so a reader never sees half a report. Zones whose files are
// there already are left alone. It returns the files written.
func WriteTrendFiles(ctx context.Context, dir string, rec Records, zones []string, month string) ([]string, error) {
	if err := os.MkdirAll(dir, 0o750); err != nil {
		return nil, err
	}
	var written []string
	var errs []error
	for _, zone := range zones {
		base := filepath.Join(dir, "trend-"+unsafeName.ReplaceAllString(zone, "_")+"-"+month)
		if _, err := os.Stat(base + ".pdf"); err == nil {
			continue
		}
		status, src := rec.TrendJSON(ctx, zone, month)
		if status != http.StatusOK {
			errs = append(errs, fmt.Errorf("zone %s: %d %s", zone, status, src))
			continue
		}
		var t report.Trend
		if err := json.Unmarshal(src, &t); err != nil {
			errs = append(errs, fmt.Errorf("zone %s: %w", zone, err))
			continue
		}
		for _, f := range []struct {
			ext   string
			write func(*bytes.Buffer, report.Trend) error
		}{
			{".html", func(b *bytes.Buffer, t report.Trend) error { return report.WriteTrendHTML(b, t) }},
			{".pdf", func(b *bytes.Buffer, t report.Trend) error { return report.WriteTrendPDF(b, t) }},
		} {
			var b bytes.Buffer
			err := f.write(&b, t)
			if err == nil {
				err = writeAtomic(base+f.ext, b.Bytes())
			}
			if err != nil {
				errs = append(errs, fmt.Errorf("zone %s: %w", zone, err))
				continue
			}
			written = append(written, base+f.ext)
		}
	}
	return written, errors.Join(errs...)
}

func writeAtomic(path string, b []byte) error {
	tmp := path + ".tmp"
	f, err := os.OpenFile(tmp, os.O_CREATE|os.O_TRUNC|os.O_WRONLY, 0o640)
	if err != nil {
		return err
	}
	if _, err := f.Write(b); err != nil {
		f.Close()
		return err
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	return os.Rename(tmp, path)
}
