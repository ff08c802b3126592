package main

import (
	"cleanmon/cmd/cleanmon/internal/site"
	"errors"
	"flag"
	"fmt"
	"io"
)

// runLint is `cleanmon lint --config FILE`: it loads the configuration as
// serve would and prints either a one-line summary or every problem, each
// as file:line:col: field: message.
func runLint(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("lint", flag.ContinueOnError)
	fs.SetOutput(stderr)
	path := fs.String("config", "", "site configuration file (YAML) to check")
	fs.Usage = func() {
		fmt.Fprintln(fs.Output(), "usage: cleanmon lint --config FILE")
		fmt.Fprintln(fs.Output(), "Checks a site configuration without starting the daemon; exit 0 if it is usable, 2 with every problem otherwise.")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return exitOK
		}
		return exitUsage
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(stderr, "cleanmon lint: unexpected argument %q\n", fs.Arg(0))
		return exitUsage
	}
	if *path == "" {
		fmt.Fprintln(stderr, "cleanmon lint: --config FILE is required")
		return exitUsage
	}
	cfg, err := site.LoadFile(*path)
	if err != nil {
		site.PrintError(stderr, "cleanmon lint", err)
		return exitUsage
	}
	fmt.Fprintf(stdout, "ok: %d zones, %d counters, %d sensors\n", len(cfg.Zones), len(cfg.Counters), len(cfg.PressureSensors))
	return exitOK
}

// checkConfigNotice is what the former name of lint prints on stderr
// before it runs lint: scripts that call it keep working, and are told.
const checkConfigNotice = "cleanmon: check-config is deprecated and will be removed; use cleanmon lint (same flags, same output)"

// runCheckConfig is the former name of lint.
func runCheckConfig(args []string, stdout, stderr io.Writer) int {
	fmt.Fprintln(stderr, checkConfigNotice)
	return runLint(args, stdout, stderr)
}
