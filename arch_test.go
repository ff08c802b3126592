package cleanmon_test

import (
	"go/parser"
	"go/token"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// The dependency direction of the project (DEVELOPERS.md, "Layout"):
// cmd → {collector, store, alerts} → classify. classify imports no project
// package; the three middle packages import none of each other (they meet
// through small interfaces that their consumers define, wired in the
// daemon); nothing outside cmd imports cmd. gonum is an outside reference
// for tests only.
var allowed = map[string][]string{
	"classify":  {},
	"collector": {"cleanmon/classify"},
	"store":     {"cleanmon/classify"},
	"alerts":    {"cleanmon/classify"},
}

// Top-level entries the layout allows (add packages below them, not
// top-level folders).
var topLevel = map[string]bool{
	"cmd": true, "classify": true, "collector": true, "store": true, "alerts": true,
	"deploy": true, "testdata": true, ".ci": true, ".git": true,
}

func TestDependencyDirection(t *testing.T) {
	fset := token.NewFileSet()
	err := filepath.WalkDir(".", func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() {
			if name := d.Name(); name == "testdata" || name == ".git" || name == "deploy" {
				return filepath.SkipDir
			}
			return nil
		}
		if !strings.HasSuffix(path, ".go") {
			return nil
		}
		f, err := parser.ParseFile(fset, path, nil, parser.ImportsOnly)
		if err != nil {
			return err
		}
		dir := filepath.ToSlash(filepath.Dir(path))
		for _, im := range f.Imports {
			p, _ := strconv.Unquote(im.Path.Value)
			if msg := violation(dir, strings.HasSuffix(path, "_test.go"), p); msg != "" {
				t.Errorf("%s imports %s: %s", path, p, msg)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}

// The daemon's own packages, below cmd/cleanmon/internal: api and web are
// mounted by the daemon (and the serve command) only, and never reach
// into each other; report and httpx are leaves that know no project
// package but classify. ops, the work of the offline commands, serves
// package main alone and reaches only what those commands need.
const internal = "cmd/cleanmon/internal/"

var (
	onlyImportedBy = map[string][]string{
		internal + "api": {"cmd/cleanmon", internal + "daemon", internal + "ops"},
		internal + "web": {"cmd/cleanmon", internal + "daemon"},
		internal + "ops": {"cmd/cleanmon"},
	}
	leaves = map[string]bool{internal + "report": true, internal + "httpx": true}
	// mayImport lists every project package an internal package may
	// import, for those that have such a list.
	mayImport = map[string][]string{
		internal + "ops": {"classify", "collector", "store", internal + "site",
			internal + "api", internal + "daemon", internal + "report"},
	}
)

// violation says why a file in the directory dir may not import p, or ""
// when it may.
func violation(dir string, isTest bool, p string) string {
	top := strings.SplitN(dir, "/", 2)[0]
	if strings.HasPrefix(p, "cleanmon/cmd") && top != "cmd" {
		return "nothing outside cmd may import the binary's packages"
	}
	if msg := internalViolation(dir, p); msg != "" {
		return msg
	}
	if strings.HasPrefix(p, "gonum.org/") && !isTest {
		return "gonum is a test-only reference"
	}
	rules, ruled := allowed[top]
	if !ruled || !strings.HasPrefix(p, "cleanmon/") || p == "cleanmon/"+top || strings.HasPrefix(p, "cleanmon/"+top+"/") {
		return ""
	}
	for _, a := range rules {
		if p == a || strings.HasPrefix(p, a+"/") {
			return ""
		}
	}
	return top + " may import only " + strings.Join(rules, ", ") + " of the project"
}

// internalViolation applies the rules of the daemon's own packages.
func internalViolation(dir, p string) string {
	pkg, ok := strings.CutPrefix(p, "cleanmon/")
	if !ok || pkg == dir {
		return ""
	}
	if leaves[dir] && pkg != "classify" {
		return dir + " may import no project package but classify"
	}
	if rules, ok := mayImport[dir]; ok && !contains(rules, pkg) {
		return dir + " may import only " + strings.Join(rules, ", ") + " of the project"
	}
	if users, ok := onlyImportedBy[pkg]; ok && !contains(users, dir) {
		return pkg + " is imported only by " + strings.Join(users, " and ")
	}
	return ""
}

func contains(list []string, s string) bool {
	for _, v := range list {
		if v == s {
			return true
		}
	}
	return false
}

func TestTopLevelLayout(t *testing.T) {
	entries, err := os.ReadDir(".")
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if e.IsDir() && !topLevel[e.Name()] {
			t.Errorf("top-level folder %s is not in the layout", e.Name())
		}
	}
}

// The rule must catch what it is meant to catch.
func TestDependencyRuleBites(t *testing.T) {
	for _, tc := range []struct {
		top, imp string
		test     bool
		bad      bool
	}{
		{"classify", "cleanmon/store", false, true},
		{"classify", "cleanmon/collector", true, true},
		{"store", "cleanmon/alerts", false, true},
		{"alerts", "cleanmon/store", false, true},
		{"collector", "cleanmon/cmd/cleanmon", false, true},
		{"store", "cleanmon/cmd/cleanmon/internal/httpx", false, true},
		{"cmd/cleanmon", "cleanmon/cmd/cleanmon/internal/api", false, false},
		{"cmd/cleanmon/internal/daemon", "cleanmon/cmd/cleanmon/internal/web", false, false},
		{"cmd/cleanmon/internal/web", "cleanmon/cmd/cleanmon/internal/api", false, true},
		{"cmd/cleanmon/internal/api", "cleanmon/cmd/cleanmon/internal/web", false, true},
		{"cmd/cleanmon/internal/site", "cleanmon/cmd/cleanmon/internal/api", true, true},
		{"cmd/cleanmon/internal/report", "cleanmon/store", false, true},
		{"cmd/cleanmon/internal/report", "cleanmon/classify", false, false},
		{"cmd/cleanmon/internal/httpx", "cleanmon/cmd/cleanmon/internal/access", false, true},
		{"cmd/cleanmon/internal/api", "cleanmon/cmd/cleanmon/internal/httpx", false, false},
		{"cmd/cleanmon", "cleanmon/cmd/cleanmon/internal/ops", false, false},
		{"cmd/cleanmon/internal/daemon", "cleanmon/cmd/cleanmon/internal/ops", false, true},
		{"cmd/cleanmon/internal/web", "cleanmon/cmd/cleanmon/internal/ops", true, true},
		{"cmd/cleanmon/internal/ops", "cleanmon/cmd/cleanmon/internal/api", false, false},
		{"cmd/cleanmon/internal/ops", "cleanmon/cmd/cleanmon/internal/report", false, false},
		{"cmd/cleanmon/internal/ops", "cleanmon/store", false, false},
		{"cmd/cleanmon/internal/ops", "cleanmon/cmd/cleanmon/internal/web", false, true},
		{"cmd/cleanmon/internal/ops", "cleanmon/cmd/cleanmon/internal/loadtest", false, true},
		{"classify", "gonum.org/v1/gonum/stat", false, true},
		{"classify", "gonum.org/v1/gonum/stat", true, false},
		{"store", "cleanmon/classify", false, false},
		{"cmd/cleanmon", "cleanmon/store", false, false},
		{"alerts", "go.etcd.io/bbolt", false, false},
	} {
		if got := violation(tc.top, tc.test, tc.imp) != ""; got != tc.bad {
			t.Errorf("%s importing %s (test %v): violation %v, want %v", tc.top, tc.imp, tc.test, got, tc.bad)
		}
	}
}
