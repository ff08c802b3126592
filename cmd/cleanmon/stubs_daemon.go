package main

import (
	"fmt"
	"io"
)

// notYet is replaced command by command as the daemon is built.
func notYet(name string) func([]string, io.Writer, io.Writer) int {
	return func(_ []string, _ io.Writer, stderr io.Writer) int {
		fmt.Fprintf(stderr, "cleanmon %s: not available in this build yet\n", name)
		return exitUsage
	}
}

var (
	runServe       = notYet("serve")
	runCheckConfig = notYet("check-config")
	runBackup      = notYet("backup")
	runVerify      = notYet("verify")
	runBench       = notYet("bench")
)
