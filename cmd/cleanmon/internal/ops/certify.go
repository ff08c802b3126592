package ops

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"os"
	"time"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/collector"
)

// CertifyOptions are the flags of `cleanmon certify` beyond the target.
type CertifyOptions struct {
	Target                          TargetSpec
	Format, Out, Macro, Instruments string
	Differential, Sequential        bool
	Length, Width                   float64              // of the location map; both or neither
	Meta                            report.Certification // site, zone, date and people printed on the report
}

// Certify certifies the samples in the file name against the target and
// writes the report (to Out atomically, else stdout). It reports whether
// the zone passed; every error is bad usage or input, never exit 1, which
// scripts read as "the zone failed".
func Certify(c CertifyOptions, name string, stdout io.Writer) (bool, error) {
	o, t, err := c.certify(name)
	if err != nil {
		return false, usage(err)
	}
	err = writeOutput(c.Out, stdout, func(w io.Writer) error { return report.Write(w, c.Format, t, o) })
	if err != nil {
		return false, usage(fmt.Errorf("writing the report: %w", err))
	}
	return o.Verdict == classify.Pass, nil
}

// certify reads the files the options name and certifies the samples.
func (c *CertifyOptions) certify(name string) (report.Certification, classify.Target, error) {
	o := c.Meta
	if err := report.CheckFormat(c.Format); err != nil {
		return o, classify.Target{}, fmt.Errorf("--format: %w", err)
	}
	t, err := c.Target.Target(true)
	if err != nil {
		return o, t, err
	}
	if t.Grade != "" && t.Sizes == nil {
		t.Sizes = classify.GMPSizes
	}
	if (c.Length > 0) != (c.Width > 0) || c.Length < 0 || c.Width < 0 {
		return o, t, fmt.Errorf("--length and --width: give both, in metres, or neither")
	}
	opt := classify.Options{Sequential: c.Sequential}
	if c.Macro != "" {
		m, err := classify.ParseMacro(c.Macro)
		if err != nil {
			return o, t, fmt.Errorf("--macro: %w", err)
		}
		opt.Macro = &m
	}
	if c.Instruments != "" {
		data, err := os.ReadFile(c.Instruments)
		if err == nil {
			opt.Instruments, err = collector.ReadInstruments(bytes.NewReader(data), c.Instruments)
		}
		if err != nil {
			return o, t, err
		}
	}
	data, err := os.ReadFile(name)
	if err != nil {
		return o, t, err
	}
	samples, err := collector.ReadSamples(bytes.NewReader(data), collector.SampleFileOptions{Name: name, Sizes: t.Sizes, Differential: c.Differential})
	if err != nil {
		return o, t, err
	}
	rep, err := classify.CertifyWith(t, samples, opt)
	if err != nil {
		return o, t, fmt.Errorf("%s: %w", name, err)
	}
	sum := sha256.Sum256(data)
	o.Report, o.SamplesFile, o.SamplesSHA256, o.Differential = rep, name, hex.EncodeToString(sum[:]), c.Differential
	if o.Date == "" {
		o.Date = time.Now().UTC().Format("2006-01-02")
	}
	if c.Length > 0 {
		if err := report.PlaceAtPlan(&o, c.Length, c.Width); err != nil {
			return o, t, fmt.Errorf("--length, --width: %w", err)
		}
	}
	return o, t, nil
}
