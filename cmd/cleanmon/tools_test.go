package main

import (
	"os"
	"os/exec"
	"testing"
)

// outsideTool finds an outside tool. Without it the test skips, saying
// which Debian package brings it; under CLEANMON_REQUIRE_TOOLS (set by
// .ci/run, which installs the tools) it fails instead.
func outsideTool(t *testing.T, name, debPackage string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatalf("%s not on PATH (Debian package %s) and CLEANMON_REQUIRE_TOOLS is set", name, debPackage)
		}
		t.Skipf("%s not on PATH (apt-get install %s): the check it makes did not run", name, debPackage)
	}
	return p
}
