package main

import (
	"cleanmon/cmd/cleanmon/internal/site"
	"errors"
	"flag"
	"fmt"
	"io"
)

// runCheckConfig is `cleanmon check-config --config FILE`: it loads the
// configuration as serve would and prints either a one-line summary or
// every problem, each as file:line:col: field: message.
func runCheckConfig(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("check-config", flag.ContinueOnError)
	fs.SetOutput(stderr)
	path := fs.String("config", "", "site configuration file (YAML) to check")
	fs.Usage = func() {
		fmt.Fprintln(fs.Output(), "usage: cleanmon check-config --config FILE")
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
		fmt.Fprintf(stderr, "cleanmon check-config: unexpected argument %q\n", fs.Arg(0))
		return exitUsage
	}
	if *path == "" {
		fmt.Fprintln(stderr, "cleanmon check-config: --config FILE is required")
		return exitUsage
	}
	cfg, err := site.LoadFile(*path)
	if err != nil {
		site.PrintError(stderr, "cleanmon check-config", err)
		return exitUsage
	}
	fmt.Fprintf(stdout, "ok: %d zones, %d counters, %d sensors\n", len(cfg.Zones), len(cfg.Counters), len(cfg.PressureSensors))
	return exitOK
}
