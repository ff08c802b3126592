package site

import (
	"errors"
	"os"
	"path/filepath"
	"testing"
)

// FuzzLoadConfig feeds any bytes to the configuration loader: it never
// panics, a refusal is a Error whose every problem names the file
// and a line (so a user can find it), and an accepted configuration loads
// again to the same digest.
func FuzzLoadConfig(f *testing.F) {
	seeds, _ := filepath.Glob(filepath.Join(repo, "testdata", "site-*.yaml"))
	seeds = append(seeds, filepath.Join(repo, "deploy", "cleanmon.example.yaml"), "demo-site.yaml")
	for _, p := range seeds {
		if b, err := os.ReadFile(p); err == nil {
			f.Add(b)
		}
	}
	f.Add([]byte("zones: [{id: a, class: 5, sizes: [\"0.5\"], locations: [{id: l}]}]\ncounters: [{id: c, zone: a, location: l, sizes: [\"0.5\"]}]\n"))
	f.Add([]byte("site: &a [*a]\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		cfg, err := Load("fuzz.yaml", data)
		if err != nil {
			var ce *Error
			if !errors.As(err, &ce) {
				t.Fatalf("refusal is not a Error: %T %v", err, err)
			}
			for _, p := range ce.Problems {
				if p.File != "fuzz.yaml" || p.Line < 1 {
					t.Fatalf("a problem without its place: %+v", p)
				}
			}
			return
		}
		again, err := Load("fuzz.yaml", data)
		if err != nil || again.digest != cfg.digest {
			t.Fatalf("an accepted configuration does not load again: %v", err)
		}
	})
}

const repo = "../../../.."
