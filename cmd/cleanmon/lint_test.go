package main

import (
	"bytes"
	"path/filepath"
	"strings"
	"testing"
)

func TestLintCommand(t *testing.T) {
	broken := filepath.Join(t.TempDir(), "unreadable.yaml")
	cases := []struct {
		name   string
		args   []string
		code   int
		stdout string
		stderr []string
	}{
		{"valid", []string{"--config", "../../testdata/site-minimal.yaml"}, exitOK, "ok: 2 zones, 1 counters, 1 sensors\n", nil},
		{"example", []string{"--config", "../../deploy/cleanmon.example.yaml"}, exitOK, "ok: 4 zones, 5 counters, 3 sensors\n", nil},
		{"broken", []string{"--config", "../../testdata/site-broken.yaml"}, exitUsage, "", []string{
			"../../testdata/site-broken.yaml:4:9: listen:",
			"../../testdata/site-broken.yaml:5:12: retention:",
			"../../testdata/site-broken.yaml:7:3: access.open_read: unknown key",
			"../../testdata/site-broken.yaml:9:34: access.tokens[0].sha256:",
			"../../testdata/site-broken.yaml:10:14: access.tokens[1].name:",
			"../../testdata/site-broken.yaml:15:20: zones[0].sizes[1]:",
			"../../testdata/site-broken.yaml:16:29: zones[0].levels.0.5.alert:",
			"../../testdata/site-broken.yaml:20:12: zones[1].grade:",
			"../../testdata/site-broken.yaml:21:14: zones[1].area_m2:",
			"../../testdata/site-broken.yaml:25:49: counters[0].location:",
			"../../testdata/site-broken.yaml:26:84: counters[1].flow_lpm:",
			"../../testdata/site-broken.yaml:27:24: counters[2].zone:",
			"../../testdata/site-broken.yaml:29:44: pressure_sensors[0].low:",
		}},
		{"missing file", []string{"--config", broken}, exitUsage, "", []string{"cleanmon lint: invalid configuration: open " + broken}},
		{"no flag", nil, exitUsage, "", []string{"--config FILE is required"}},
		{"stray argument", []string{"--config", "x.yaml", "y"}, exitUsage, "", []string{`unexpected argument "y"`}},
		{"help", []string{"-h"}, exitOK, "", []string{"usage: cleanmon lint --config FILE"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var out, errb bytes.Buffer
			code := runLint(c.args, &out, &errb)
			if code != c.code {
				t.Fatalf("exit %d, want %d; stderr:\n%s", code, c.code, errb.String())
			}
			if out.String() != c.stdout {
				t.Errorf("stdout %q, want %q", out.String(), c.stdout)
			}
			for _, w := range c.stderr {
				if !strings.Contains(errb.String(), w) {
					t.Errorf("stderr lacks %q:\n%s", w, errb.String())
				}
			}
			if c.code == exitUsage && c.name == "broken" {
				// Every problem is one line, and each names file:line:col.
				for _, l := range strings.Split(strings.TrimSpace(errb.String()), "\n") {
					if !strings.HasPrefix(l, "../../testdata/site-broken.yaml:") {
						t.Errorf("line without position: %q", l)
					}
				}
			}
		})
	}
}

// The former name still works, with the same output and exit status, and
// says once on stderr that it is deprecated.
func TestCheckConfigIsLint(t *testing.T) {
	for _, args := range [][]string{
		{"--config", "../../deploy/cleanmon.example.yaml"},
		{"--config", "../../testdata/site-broken.yaml"},
	} {
		var lo, le, co, ce bytes.Buffer
		lc := runLint(args, &lo, &le)
		cc := run(append([]string{"check-config"}, args...), &co, &ce)
		if lc != cc || lo.String() != co.String() {
			t.Errorf("%v: lint %d %q, check-config %d %q", args, lc, lo.String(), cc, co.String())
		}
		first, rest, _ := strings.Cut(ce.String(), "\n")
		if first != checkConfigNotice || rest != le.String() {
			t.Errorf("%v: check-config stderr %q, want the notice then lint's %q", args, ce.String(), le.String())
		}
	}
}
