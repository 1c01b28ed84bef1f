package localfs_test

import (
	"os"
	"syscall"
	"testing"
)

// sameDevice reports whether two paths are on one file system.
func sameDevice(t *testing.T, a, b string) bool {
	t.Helper()
	dev := func(p string) uint64 {
		st, err := os.Stat(p)
		if err != nil {
			t.Fatal(err)
		}
		return uint64(st.Sys().(*syscall.Stat_t).Dev)
	}
	return dev(a) == dev(b)
}
