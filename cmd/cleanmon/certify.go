package main

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"time"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/collector"
)

func runCertify(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("certify", "--class N --area M2 --sizes LIST [--edition 2015|1999] [--state at-rest|in-operation] [--format text|json|html] [--out FILE] SAMPLES.csv", stderr)
	var tf targetFlags
	tf.register(fs, "", true)
	format := fs.String("format", "text", "report format: text, json or html")
	outFile := fs.String("out", "", "write the report to this file (atomically) instead of stdout")
	differential := fs.Bool("differential", false, "counts in the file are per channel (this size up to the next), not cumulative")
	var meta report.Certification
	fs.StringVar(&meta.Site, "site", "", "site name printed on the report")
	fs.StringVar(&meta.Zone, "zone", "", "zone name printed on the report")
	fs.StringVar(&meta.Date, "date", "", "report date (default today, UTC)")
	fs.StringVar(&meta.Certifier, "by", "", "person or organisation responsible for the test, printed on the report")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) != 1 {
		return fail(stderr, "certify", fmt.Errorf("give exactly one samples file (got %d)", len(pos)))
	}
	switch *format {
	case "text", "json", "html":
	default:
		return fail(stderr, "certify", fmt.Errorf("--format: %q (want text, json or html)", *format))
	}
	t, err := tf.target(true)
	if err != nil {
		return fail(stderr, "certify", err)
	}
	if t.Grade != "" && t.Sizes == nil {
		t.Sizes = classify.GMPSizes
	}
	name := pos[0]
	data, err := os.ReadFile(name)
	if err != nil {
		return fail(stderr, "certify", err)
	}
	samples, err := collector.ReadSamples(bytes.NewReader(data), collector.SampleFileOptions{Name: name, Sizes: t.Sizes, Differential: *differential})
	if err != nil {
		return fail(stderr, "certify", err)
	}
	rep, err := classify.Certify(t, samples)
	if err != nil {
		return fail(stderr, "certify", err)
	}
	sum := sha256.Sum256(data)
	meta.Report = rep
	meta.SamplesFile = name
	meta.SamplesSHA256 = hex.EncodeToString(sum[:])
	meta.Differential = *differential
	if meta.Date == "" {
		meta.Date = time.Now().UTC().Format("2006-01-02")
	}
	err = writeOutput(*outFile, stdout, func(w io.Writer) error {
		switch *format {
		case "json":
			enc := json.NewEncoder(w)
			enc.SetIndent("", "  ")
			return enc.Encode(meta)
		case "html":
			return report.WriteHTML(w, t, meta)
		default:
			return report.WriteText(w, t, meta)
		}
	})
	if err != nil {
		// Not exit 1: scripts read 1 as "the zone failed".
		return fail(stderr, "certify", fmt.Errorf("writing the report: %w", err))
	}
	if rep.Verdict != classify.Pass {
		return exitFail
	}
	return exitOK
}
