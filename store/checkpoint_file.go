package store

import (
	"bufio"
	"fmt"
	"os"
	"strings"
)

// ReadCheckpointFile reads a file of kept checkpoints, one a line in the
// String form, and returns the newest. The daemon's log lines are read
// too (their checkpoint="…" value is taken), so that a site may keep a
// grep of its log. Blank and # lines are skipped; any other line that is
// not a checkpoint is refused with its file and line number.
func ReadCheckpointFile(name string) (Checkpoint, error) {
	f, err := os.Open(name)
	if err != nil {
		return Checkpoint{}, fmt.Errorf("%w: %v", ErrCheckpoint, err)
	}
	defer f.Close()
	var best Checkpoint
	found := false
	sc := bufio.NewScanner(f)
	for n := 1; sc.Scan(); n++ {
		line := strings.TrimSpace(sc.Text())
		if line == "" || strings.HasPrefix(line, "#") {
			continue
		}
		if _, v, ok := strings.Cut(line, `checkpoint="`); ok {
			line, _, _ = strings.Cut(v, `"`)
		}
		cp, err := ParseCheckpoint(line)
		if err != nil {
			return Checkpoint{}, fmt.Errorf("%s:%d: %w", name, n, err)
		}
		if !found || cp.Seq > best.Seq {
			best, found = cp, true
		}
	}
	if err := sc.Err(); err != nil {
		return Checkpoint{}, fmt.Errorf("%w: %s: %v", ErrCheckpoint, name, err)
	}
	if !found {
		return Checkpoint{}, fmt.Errorf("%w: %s holds no checkpoint", ErrCheckpoint, name)
	}
	return best, nil
}
