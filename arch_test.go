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

// The dependency direction of DESIGN.md §2: cmd → {collector, store,
// alerts} → classify. classify imports no project package; the three
// middle packages import none of each other (they meet through small
// interfaces that their consumers define, wired in cmd); nothing imports
// cmd. gonum is an outside reference for tests only.
var allowed = map[string][]string{
	"classify":  {},
	"collector": {"cleanmon/classify"},
	"store":     {"cleanmon/classify"},
	"alerts":    {"cleanmon/classify"},
}

// Top-level entries the layout allows (DESIGN.md §2: add files, not
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
		top := strings.SplitN(filepath.ToSlash(path), "/", 2)[0]
		for _, im := range f.Imports {
			p, _ := strconv.Unquote(im.Path.Value)
			if msg := violation(top, strings.HasSuffix(path, "_test.go"), p); msg != "" {
				t.Errorf("%s imports %s: %s", path, p, msg)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}

// violation says why a file under the top-level folder top may not import
// p, or "" when it may.
func violation(top string, isTest bool, p string) string {
	if strings.HasPrefix(p, "cleanmon/cmd") {
		return "nothing may import the binary"
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

func TestTopLevelLayout(t *testing.T) {
	entries, err := os.ReadDir(".")
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if e.IsDir() && !topLevel[e.Name()] {
			t.Errorf("top-level folder %s is not in the layout of DESIGN.md §2", e.Name())
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
		{"classify", "gonum.org/v1/gonum/stat", false, true},
		{"classify", "gonum.org/v1/gonum/stat", true, false},
		{"store", "cleanmon/classify", false, false},
		{"cmd", "cleanmon/store", false, false},
		{"alerts", "go.etcd.io/bbolt", false, false},
	} {
		if got := violation(tc.top, tc.test, tc.imp) != ""; got != tc.bad {
			t.Errorf("%s importing %s (test %v): violation %v, want %v", tc.top, tc.imp, tc.test, got, tc.bad)
		}
	}
}
