package deploy_test

import (
	"path/filepath"
	"strings"
	"testing"
)

// TestDeployMetaRules: promtool checks the meta-monitoring rules and runs
// their unit tests, and the central Prometheus's configuration loads them.
func TestDeployMetaRules(t *testing.T) {
	promtool := deployTool(t, "promtool", "prometheus")
	prom := deployPath("prometheus")
	for _, args := range [][]string{
		{"check", "rules", filepath.Join(prom, "cleanmon-meta-rules.yml")},
		{"test", "rules", filepath.Join(prom, "cleanmon-meta-rules.test.yml")},
		{"check", "config", filepath.Join(prom, "federation.yml")},
	} {
		out, err := deployRun(t, promtool, args...)
		if err != nil || !strings.Contains(out, "SUCCESS") {
			t.Errorf("promtool %s: %v\n%s", strings.Join(args, " "), err, out)
		}
		if args[1] == "config" && !strings.Contains(out, "cleanmon-meta-rules.yml") {
			t.Errorf("federation.yml does not load cleanmon-meta-rules.yml:\n%s", out)
		}
	}
}

// TestDeployNotifyUnit: the unit waits for the daemon's READY=1 and has a
// watchdog, so that a hung daemon is restarted.
func TestDeployNotifyUnit(t *testing.T) {
	u, err := deployParseUnit(deployRead(t, "systemd", "cleanmon.service"))
	if err != nil {
		t.Fatal(err)
	}
	for key, want := range map[string]string{"Type": "notify", "NotifyAccess": "main", "WatchdogSec": "30s", "Restart": "on-failure"} {
		if v, _ := u.last("Service", key); v != want {
			t.Errorf("[Service] %s=%q, want %q", key, v, want)
		}
	}
}

// TestDeployDockerfileStamps: the image's build stamps the version and
// revision the daemon reports.
func TestDeployDockerfileStamps(t *testing.T) {
	df := string(deployRead(t, "Dockerfile"))
	for _, want := range []string{"ARG VERSION", "ARG REVISION",
		"-X cleanmon/cmd/cleanmon/internal/daemon.version=${VERSION}", "-X cleanmon/cmd/cleanmon/internal/daemon.revision=${REVISION}"} {
		if !strings.Contains(df, want) {
			t.Errorf("Dockerfile lacks %q", want)
		}
	}
}
