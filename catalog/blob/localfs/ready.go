package localfs

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
)

// Ready reports whether the store's folders are there: its root and the
// tmp folder every Put writes through (a volume that is not mounted, or
// was emptied under the server, fails here).
func (s *Store) Ready(ctx context.Context) error {
	for _, d := range []string{s.root, filepath.Join(s.root, "tmp")} {
		fi, err := os.Stat(d)
		if err != nil {
			return fmt.Errorf("localfs: %w", err)
		}
		if !fi.IsDir() {
			return fmt.Errorf("localfs: %s is not a folder", d)
		}
	}
	return ctx.Err()
}
