package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"os/signal"
	"syscall"

	"cleanmon/cmd/cleanmon/internal/daemon"
	"cleanmon/cmd/cleanmon/internal/site"
)

// runServe is `cleanmon serve`: it runs until SIGINT or SIGTERM.
func runServe(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("serve", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var o daemon.Options
	fs.StringVar(&o.ConfigPath, "config", "", "site configuration file (YAML)")
	fs.BoolVar(&o.Demo, "demo", false, "run the built-in demo site with simulated counters (API open, loopback only)")
	fs.StringVar(&o.Listen, "listen", "", "address to listen on, host:port (default: the configuration's listen, else "+daemon.DefaultListen+"; port 0 picks a free one)")
	fs.StringVar(&o.DataDir, "data", "", "data directory of the store (default: the configuration's data_dir; --demo: a temporary directory)")
	fs.Float64Var(&o.Speed, "speed", 1, "--demo only: how many times faster than the wall clock simulated time runs")
	logFormat := fs.String("log-format", "text", "log lines as text (key=value) or json (one object a line, for a log collector)")
	fs.BoolVar(&o.DemoModbus, "demo-modbus", false, "--demo only: serve the simulated counters as Modbus TCP devices on loopback and poll them")
	fs.Usage = func() {
		fmt.Fprintln(fs.Output(), "usage: cleanmon serve --config FILE [--listen ADDR] [--data DIR] [--log-format text|json]")
		fmt.Fprintln(fs.Output(), "       cleanmon serve --demo [--listen ADDR] [--data DIR] [--speed N]")
		fmt.Fprintln(fs.Output(), "Runs the monitoring daemon until SIGINT or SIGTERM, then finishes requests in flight and closes the store.")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return exitOK
		}
		return exitUsage
	}
	speedSet := false
	fs.Visit(func(f *flag.Flag) { speedSet = speedSet || f.Name == "speed" })
	switch {
	case fs.NArg() > 0:
		fmt.Fprintf(stderr, "cleanmon serve: unexpected argument %q\n", fs.Arg(0))
		return exitUsage
	case o.Demo && o.ConfigPath != "":
		fmt.Fprintln(stderr, "cleanmon serve: --demo runs the built-in site; it takes no --config")
		return exitUsage
	case !o.Demo && o.ConfigPath == "":
		fmt.Fprintln(stderr, "cleanmon serve: --config FILE is required (or --demo)")
		return exitUsage
	case !o.Demo && o.DemoModbus:
		fmt.Fprintln(stderr, "cleanmon serve: --demo-modbus applies to --demo only")
		return exitUsage
	case !o.Demo && speedSet:
		fmt.Fprintln(stderr, "cleanmon serve: --speed applies to --demo only")
		return exitUsage
	case *logFormat != "text" && *logFormat != "json":
		fmt.Fprintf(stderr, "cleanmon serve: --log-format %q: want text or json\n", *logFormat)
		return exitUsage
	case !(o.Speed > 0) || math.IsInf(o.Speed, 0):
		fmt.Fprintf(stderr, "cleanmon serve: --speed %v: want a positive factor\n", o.Speed)
		return exitUsage
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	o.Log = slog.New(slog.NewTextHandler(stderr, nil))
	if *logFormat == "json" {
		o.Log = slog.New(slog.NewJSONHandler(stderr, nil))
	}
	return serve(ctx, o, stdout, stderr)
}

// serve runs the daemon until ctx ends; SIGHUP reloads the configuration
// (not in the demo, which has no file).
func serve(ctx context.Context, o daemon.Options, stdout, stderr io.Writer) int {
	o.Stdout = stdout
	if o.Log == nil {
		o.Log = slog.New(slog.NewTextHandler(stderr, nil))
	}
	d, err := daemon.New(o)
	if err != nil {
		site.PrintError(stderr, "cleanmon serve", err)
		if errors.Is(err, daemon.ErrUsage) {
			return exitUsage
		}
		return exitFail
	}
	if !o.Demo {
		hup := make(chan os.Signal, 1)
		signal.Notify(hup, syscall.SIGHUP)
		defer signal.Stop(hup)
		go func() {
			for {
				select {
				case <-ctx.Done():
					return
				case <-hup:
					d.Reload()
				}
			}
		}()
	}
	code := exitOK
	if err := d.Run(ctx); err != nil {
		fmt.Fprintf(stderr, "cleanmon serve: %v\n", err)
		code = exitFail
	}
	if err := d.Close(); err != nil {
		code = exitFail
	}
	return code
}
