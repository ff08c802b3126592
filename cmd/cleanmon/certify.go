package main

import (
	"flag"
	"fmt"
	"io"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// registerCertify defines the flags of certify: the target, the files and
// what the report prints.
func registerCertify(fs *flag.FlagSet, c *ops.CertifyOptions) {
	registerTarget(fs, &c.Target, true)
	fs.StringVar(&c.Format, "format", "text", "report format: text, json, html or pdf")
	fs.StringVar(&c.Out, "out", "", "write the report to this file (atomically) instead of stdout")
	fs.BoolVar(&c.Differential, "differential", false, "counts in the file are per channel (this size up to the next), not cumulative")
	fs.BoolVar(&c.Sequential, "sequential", false, "decide each location by sequential sampling (ISO 14644-1:2015 Annex D) from its samples in time order")
	fs.StringVar(&c.Macro, "macro", "", `macroparticle descriptor reported with the designation, e.g. "M(10000; >5 µm); time-of-flight spectrometer" (Annex C)`)
	fs.StringVar(&c.Instruments, "instruments", "", "CSV of the counters (counter, model, serial, calibration_due): listed in the report; an unlisted counter or a calibration past due is a departure")
	fs.Float64Var(&c.Length, "length", 0, "zone length in m, for the location map (with --width); locations without x_m, y_m are placed at the plan layout")
	fs.Float64Var(&c.Width, "width", 0, "zone width in m, for the location map (with --length)")
	fs.StringVar(&c.Meta.Site, "site", "", "site name printed on the report")
	fs.StringVar(&c.Meta.Zone, "zone", "", "zone name printed on the report")
	fs.StringVar(&c.Meta.Date, "date", "", "report date (default today, UTC)")
	fs.StringVar(&c.Meta.Certifier, "by", "", "person responsible for the test, printed on the report")
	fs.StringVar(&c.Meta.Organisation, "organisation", "", "testing organisation printed on the report")
	fs.StringVar(&c.Meta.Operator, "operator", "", "person who took the samples, printed on the report")
}

// runCertify exits 0 when the zone passes, 1 when it does not, and 2 for
// bad usage or input (ops.Certify).
func runCertify(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("certify", "--class N --area M2 --sizes LIST [--edition 2015|1999] [--state at-rest|in-operation] [--sequential] [--macro DESCRIPTOR] [--instruments FILE] [--format text|json|html|pdf] [--out FILE] SAMPLES.csv", stderr)
	var c ops.CertifyOptions
	registerCertify(fs, &c)
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	if len(pos) != 1 {
		return fail(stderr, "certify", fmt.Errorf("give exactly one samples file (got %d)", len(pos)))
	}
	pass, err := ops.Certify(c, pos[0], stdout)
	if err != nil {
		return exit(stderr, "certify", err)
	}
	if !pass {
		return exitFail
	}
	return exitOK
}
