// Command cleanmon is a cleanroom particle-count and differential-pressure
// monitoring daemon, and the offline tools to plan and certify a zone
// against ISO 14644-1 or EU GMP Annex 1.
package main

import (
	"fmt"
	"io"
	"os"
)

// Exit statuses shared by every sub-command.
const (
	exitOK    = 0 // success, or a certification that passes
	exitFail  = 1 // a certification that fails, or a runtime fault
	exitUsage = 2 // bad usage or bad input
)

// command is one sub-command: run receives the arguments after the command
// name and returns the process exit status.
type command struct {
	name    string
	summary string
	run     func(args []string, stdout, stderr io.Writer) int
}

func commands() []command {
	return []command{
		{"serve", "run the monitoring daemon (--config FILE, or --demo)", runServe},
		{"lint", "check a site configuration without starting the daemon", runLint},
		{"check-config", "deprecated name of lint", runCheckConfig},
		{"limits", "print ISO 14644-1 class limits or EU GMP grade limits", runLimits},
		{"plan", "print the sampling plan for a zone: locations, volume, time", runPlan},
		{"certify", "evaluate planned samples against a class and print the verdict", runCertify},
		{"recovery", "fit the recovery rate and 100:1 time after a particle challenge (ISO 14644-3)", runRecovery},
		{"backup", "write a consistent copy of a store to a file", runBackup},
		{"verify", "check a store's consistency and integrity", runVerify},
		{"user", "add, disable, enable, unlock or reset the account of a person (no daemon running)", runUser},
		{"keygen", "write a key pair that signs the audit chain", runKeygen},
		{"compact", "rewrite a stopped store without its free pages", runCompact},
		{"report", "print a zone's month on one page: report trend --zone Z --month YYYY-MM", runReport},
		{"runs", "import production runs from a CSV file into a running daemon", runRuns},
		{"bench", "measure ingest throughput and latency on loopback", runBench},
		{"soak", "run ingest and queries together on loopback for a bounded time", runSoak},
	}
}

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		usage(stderr)
		return exitUsage
	}
	name := args[0]
	if name == "help" || name == "-h" || name == "--help" {
		if len(args) > 1 {
			return run([]string{args[1], "-h"}, stdout, stderr)
		}
		usage(stdout)
		return exitOK
	}
	for _, c := range commands() {
		if c.name == name {
			return c.run(args[1:], stdout, stderr)
		}
	}
	fmt.Fprintf(stderr, "cleanmon: unknown command %q (see cleanmon help)\n", name)
	return exitUsage
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: cleanmon <command> [flags]")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "commands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-13s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "  help          this list; cleanmon help <command> or cleanmon <command> -h for its flags")
}
