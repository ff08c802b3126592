package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// TestREADMEExamples runs every console block of the README that follows an
// `<!-- example -->` marker and checks that the command prints exactly what
// the README shows, so the documentation cannot drift from the program.
func TestREADMEExamples(t *testing.T) {
	readme, err := os.ReadFile(filepath.Join(repo, "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	t.Chdir(repo) // the examples use paths relative to the repository root
	lines := strings.Split(string(readme), "\n")
	found := 0
	for i := 0; i < len(lines); i++ {
		marker := strings.TrimSpace(lines[i])
		if !strings.HasPrefix(marker, "<!-- example") {
			continue
		}
		wantCode := 0
		if j := strings.Index(marker, "exit="); j >= 0 {
			wantCode, _ = strconv.Atoi(strings.Fields(marker[j+5:])[0])
		}
		if i+2 >= len(lines) || lines[i+1] != "```console" || !strings.HasPrefix(lines[i+2], "$ go run ./cmd/cleanmon ") {
			t.Fatalf("README line %d: an example marker must be followed by a console block starting with $ go run ./cmd/cleanmon", i+1)
		}
		args := shellWords(strings.TrimPrefix(lines[i+2], "$ go run ./cmd/cleanmon "))
		var want strings.Builder
		j := i + 3
		for ; j < len(lines) && lines[j] != "```"; j++ {
			want.WriteString(lines[j] + "\n")
		}
		found++
		var out, errb bytes.Buffer
		code := run(args, &out, &errb)
		if code != wantCode {
			t.Errorf("README line %d: exit %d, want %d (stderr %s)", i+3, code, wantCode, errb.String())
		}
		if out.String() != want.String() {
			t.Errorf("README line %d: output differs; the program prints:\n%s", i+3, out.String())
		}
		i = j
	}
	if found < 7 {
		t.Errorf("found %d README examples, want limits, limits --fed-std, plan, plan with a layout, certify, sequential and recovery", found)
	}
}

// shellWords splits a command line as a shell would for the README's
// examples: on spaces, with "double-quoted" words kept whole.
func shellWords(s string) []string {
	var out []string
	var w strings.Builder
	inWord, quoted := false, false
	for _, r := range s {
		switch {
		case r == '"':
			quoted, inWord = !quoted, true
		case r == ' ' && !quoted:
			if inWord {
				out = append(out, w.String())
				w.Reset()
			}
			inWord = false
		default:
			w.WriteRune(r)
			inWord = true
		}
	}
	if inWord {
		out = append(out, w.String())
	}
	return out
}

func TestShellWords(t *testing.T) {
	got := shellWords(`limits --class 5 --macro "M(2000; >5 µm); microscopy"  x`)
	want := []string{"limits", "--class", "5", "--macro", "M(2000; >5 µm); microscopy", "x"}
	if strings.Join(got, "|") != strings.Join(want, "|") {
		t.Errorf("%q, want %q", got, want)
	}
}
