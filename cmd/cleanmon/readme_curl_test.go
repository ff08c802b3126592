package main

import (
	"fmt"
	"os"
	"os/exec"
	"strings"
	"testing"
	"time"
)

// readmeCurls returns every curl command of the README's sh blocks as
// printed: continuation lines joined, here-documents included.
func readmeCurls(t *testing.T) []string {
	t.Helper()
	b, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	var out []string
	lines := strings.Split(string(b), "\n")
	inSh := false
	for i := 0; i < len(lines); i++ {
		l := lines[i]
		trim := strings.TrimSpace(l)
		switch {
		case strings.HasPrefix(trim, "```sh"):
			inSh = true
			continue
		case strings.HasPrefix(trim, "```"):
			inSh = false
			continue
		}
		if !inSh || !strings.HasPrefix(trim, "curl ") {
			continue
		}
		cmd := []string{trim}
		for strings.HasSuffix(cmd[len(cmd)-1], "\\") && i+1 < len(lines) {
			i++
			cmd = append(cmd, lines[i])
		}
		if _, tag, ok := strings.Cut(strings.Join(cmd, "\n"), "<<'"); ok {
			end, _, _ := strings.Cut(tag, "'")
			for i+1 < len(lines) {
				i++
				cmd = append(cmd, lines[i])
				if strings.TrimSpace(lines[i]) == end {
					break
				}
			}
		}
		out = append(out, strings.Join(cmd, "\n"))
	}
	return out
}

// TestREADMECurlExamples runs every curl example of the README, as
// printed, against the demo daemon: each must succeed (HTTP 2xx). Only
// the address is the test's own, and the tokens of the examples are set
// (the demo asks for none).
func TestREADMECurlExamples(t *testing.T) {
	curl := outsideTool(t, "curl", "curl")
	cmds := readmeCurls(t)
	if len(cmds) < 6 {
		t.Fatalf("found %d curl examples in README.md: %q", len(cmds), cmds)
	}
	d := startDaemon(t, "--demo")
	waitUntil(t, "the demo's environment samples", 60*time.Second, func() bool {
		var env []struct {
			Time *string `json:"time"`
		}
		getJSON(t, d, "/api/v1/environment", &env)
		return len(env) > 0 && env[0].Time != nil
	})
	for i, c := range cmds {
		t.Run(fmt.Sprintf("example-%d", i+1), func(t *testing.T) {
			script := "curl() { " + curl + " --fail-with-body -sS \"$@\"; }\n" + strings.ReplaceAll(c, "http://127.0.0.1:8080", d.url)
			cmd := exec.Command("bash", "-eo", "pipefail", "-c", script)
			cmd.Env = append(os.Environ(), "INGEST_TOKEN=demo", "VIEWER_TOKEN=demo", "OPERATOR_TOKEN=demo", "ADMIN_TOKEN=demo")
			out, err := cmd.CombinedOutput()
			if err != nil {
				t.Fatalf("%s\n→ %v\n%s", c, err, out)
			}
		})
	}
}
