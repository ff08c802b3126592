package main

import (
	"fmt"
	"io"

	"cleanmon/cmd/cleanmon/internal/ops"
)

// runReport dispatches `cleanmon report <kind>`; trend is the one kind.
func runReport(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] != "trend" {
		if len(args) > 0 && (args[0] == "-h" || args[0] == "--help") {
			fmt.Fprintln(stdout, "usage: cleanmon report trend --zone Z --month YYYY-MM (--url URL | --data DIR --config FILE) [--format text|html|pdf] [--out FILE]")
			return exitOK
		}
		fmt.Fprintln(stderr, "cleanmon report: want `cleanmon report trend ...` (see cleanmon report trend -h)")
		return exitUsage
	}
	return runReportTrend(args[1:], stdout, stderr)
}

// runReportTrend prints a zone's month on one page, from a running daemon
// (--url) or from a store no daemon holds (--data with --config).
func runReportTrend(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("report trend", "--zone Z --month YYYY-MM (--url URL | --data DIR --config FILE) [--format text|html|pdf] [--out FILE]", stderr)
	var o ops.TrendOptions
	fs.StringVar(&o.Zone, "zone", "", "zone id")
	fs.StringVar(&o.Month, "month", "", "month, e.g. 2026-03 (default: the month before this one)")
	fs.StringVar(&o.URL, "url", "", "base URL of a running daemon, e.g. http://127.0.0.1:8080")
	fs.StringVar(&o.TokenFile, "token-file", "", "file holding a viewer token for --url (else $CLEANMON_TOKEN)")
	fs.StringVar(&o.Data, "data", "", "data directory of a store that no daemon holds")
	fs.StringVar(&o.Config, "config", "", "site configuration, with --data")
	fs.StringVar(&o.Format, "format", "text", "text, html or pdf")
	fs.StringVar(&o.Out, "out", "", "file to write (default standard output)")
	var err error
	if o.Args, err = parseArgs(fs, args); err != nil {
		return exitUsage
	}
	return exit(stderr, "report trend", ops.Trend(o, stdout))
}
