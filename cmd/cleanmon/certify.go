package main

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"flag"
	"fmt"
	"io"
	"os"
	"time"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/collector"
)

// certifyFlags are the flags of certify beyond the target.
type certifyFlags struct {
	tf                        targetFlags
	format, out, macro, instr string
	differential, sequential  bool
	length, width             float64
	meta                      report.Certification
}

func (c *certifyFlags) register(fs *flag.FlagSet) {
	c.tf.register(fs, "", true)
	fs.StringVar(&c.format, "format", "text", "report format: text, json, html or pdf")
	fs.StringVar(&c.out, "out", "", "write the report to this file (atomically) instead of stdout")
	fs.BoolVar(&c.differential, "differential", false, "counts in the file are per channel (this size up to the next), not cumulative")
	fs.BoolVar(&c.sequential, "sequential", false, "decide each location by sequential sampling (ISO 14644-1:2015 Annex D) from its samples in time order")
	fs.StringVar(&c.macro, "macro", "", `macroparticle descriptor reported with the designation, e.g. "M(10000; >5 µm); time-of-flight spectrometer" (Annex C)`)
	fs.StringVar(&c.instr, "instruments", "", "CSV of the counters (counter, model, serial, calibration_due): listed in the report; an unlisted counter or a calibration past due is a departure")
	fs.Float64Var(&c.length, "length", 0, "zone length in m, for the location map (with --width); locations without x_m, y_m are placed at the plan layout")
	fs.Float64Var(&c.width, "width", 0, "zone width in m, for the location map (with --length)")
	fs.StringVar(&c.meta.Site, "site", "", "site name printed on the report")
	fs.StringVar(&c.meta.Zone, "zone", "", "zone name printed on the report")
	fs.StringVar(&c.meta.Date, "date", "", "report date (default today, UTC)")
	fs.StringVar(&c.meta.Certifier, "by", "", "person responsible for the test, printed on the report")
	fs.StringVar(&c.meta.Organisation, "organisation", "", "testing organisation printed on the report")
	fs.StringVar(&c.meta.Operator, "operator", "", "person who took the samples, printed on the report")
}

func runCertify(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("certify", "--class N --area M2 --sizes LIST [--edition 2015|1999] [--state at-rest|in-operation] [--sequential] [--macro DESCRIPTOR] [--instruments FILE] [--format text|json|html|pdf] [--out FILE] SAMPLES.csv", stderr)
	var c certifyFlags
	c.register(fs)
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) != 1 {
		return fail(stderr, "certify", fmt.Errorf("give exactly one samples file (got %d)", len(pos)))
	}
	o, t, err := c.certify(pos[0])
	if err != nil {
		return fail(stderr, "certify", err)
	}
	err = writeOutput(c.out, stdout, func(w io.Writer) error { return report.Write(w, c.format, t, o) })
	if err != nil {
		// Not exit 1: scripts read 1 as "the zone failed".
		return fail(stderr, "certify", fmt.Errorf("writing the report: %w", err))
	}
	if o.Verdict != classify.Pass {
		return exitFail
	}
	return exitOK
}

// certify reads the files the flags name and certifies the samples.
func (c *certifyFlags) certify(name string) (report.Certification, classify.Target, error) {
	o := c.meta
	if err := report.CheckFormat(c.format); err != nil {
		return o, classify.Target{}, fmt.Errorf("--format: %w", err)
	}
	t, err := c.tf.target(true)
	if err != nil {
		return o, t, err
	}
	if t.Grade != "" && t.Sizes == nil {
		t.Sizes = classify.GMPSizes
	}
	if (c.length > 0) != (c.width > 0) || c.length < 0 || c.width < 0 {
		return o, t, fmt.Errorf("--length and --width: give both, in metres, or neither")
	}
	opt := classify.Options{Sequential: c.sequential}
	if c.macro != "" {
		m, err := classify.ParseMacro(c.macro)
		if err != nil {
			return o, t, fmt.Errorf("--macro: %w", err)
		}
		opt.Macro = &m
	}
	if c.instr != "" {
		data, err := os.ReadFile(c.instr)
		if err == nil {
			opt.Instruments, err = collector.ReadInstruments(bytes.NewReader(data), c.instr)
		}
		if err != nil {
			return o, t, err
		}
	}
	data, err := os.ReadFile(name)
	if err != nil {
		return o, t, err
	}
	samples, err := collector.ReadSamples(bytes.NewReader(data), collector.SampleFileOptions{Name: name, Sizes: t.Sizes, Differential: c.differential})
	if err != nil {
		return o, t, err
	}
	rep, err := classify.CertifyWith(t, samples, opt)
	if err != nil {
		return o, t, fmt.Errorf("%s: %w", name, err)
	}
	sum := sha256.Sum256(data)
	o.Report, o.SamplesFile, o.SamplesSHA256, o.Differential = rep, name, hex.EncodeToString(sum[:]), c.differential
	if o.Date == "" {
		o.Date = time.Now().UTC().Format("2006-01-02")
	}
	if c.length > 0 {
		if err := report.PlaceAtPlan(&o, c.length, c.width); err != nil {
			return o, t, fmt.Errorf("--length, --width: %w", err)
		}
	}
	return o, t, nil
}
