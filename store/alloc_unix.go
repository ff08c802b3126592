//go:build unix

package store

import (
	"os"
	"syscall"
)

func allocatedBytes(path string) (int64, error) {
	info, err := os.Stat(path)
	if err != nil {
		return 0, err
	}
	if st, ok := info.Sys().(*syscall.Stat_t); ok {
		return st.Blocks * 512, nil
	}
	return info.Size(), nil
}
