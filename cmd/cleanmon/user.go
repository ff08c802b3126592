package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"strings"

	"cleanmon/cmd/cleanmon/internal/daemon"
	"cleanmon/cmd/cleanmon/internal/ops"
)

// runUser is `cleanmon user add|disable|enable|unlock|reset|role NAME`:
// accounts of the people who sign in, changed on the store while no
// daemon runs (with a daemon running, an admin uses its accounts page).
func runUser(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("user", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var c daemon.AccountCommand
	fs.StringVar(&c.DataDir, "data", "", "data directory of the store (default: the configuration's data_dir)")
	fs.StringVar(&c.ConfigPath, "config", "", "site configuration (for data_dir and the accounts policy)")
	fs.StringVar(&c.Op.Role, "role", "", "add, role: viewer, operator, qa or admin")
	fs.StringVar(&c.Op.FullName, "full-name", "", "add: the person's full name, shown on records and signatures")
	fs.StringVar(&c.Op.Reason, "reason", "", "why (kept in the audit trail)")
	fs.Usage = func() {
		fmt.Fprintln(fs.Output(), "usage: cleanmon user add NAME --role ROLE --full-name \"FULL NAME\" --data DIR")
		fmt.Fprintln(fs.Output(), "       cleanmon user disable|enable|unlock|reset NAME --data DIR")
		fmt.Fprintln(fs.Output(), "       cleanmon user role NAME --role ROLE --data DIR")
		fmt.Fprintln(fs.Output(), "Changes an account on the store while no daemon runs; add and reset print a new password once.")
		fs.PrintDefaults()
	}
	if len(args) > 0 && !strings.HasPrefix(args[0], "-") {
		c.Op.Op, args = args[0], args[1:]
	}
	if len(args) > 0 && !strings.HasPrefix(args[0], "-") {
		c.Op.Name, args = args[0], args[1:]
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return exitOK
		}
		return exitUsage
	}
	switch {
	case c.Op.Op == "" || c.Op.Name == "":
		fs.Usage()
		return exitUsage
	case fs.NArg() > 0:
		fmt.Fprintf(stderr, "cleanmon user: unexpected argument %q\n", fs.Arg(0))
		return exitUsage
	}
	return exit(stderr, "user "+c.Op.Op+" "+c.Op.Name, ops.User(context.Background(), c, stdout))
}
