package catalog

import (
	"context"
	"errors"
	"fmt"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// Ready reports whether the store can serve: its metadata file answers a
// read transaction and its blob store answers (see ReadyChecker).
// The error names the part that failed.
func (s *Store) Ready(ctx context.Context) error {
	if err := s.db.View(func(tx *bolt.Tx) error {
		if tx.Bucket(bucketMeta) == nil {
			return errors.New("no meta bucket")
		}
		return nil
	}); err != nil {
		return fmt.Errorf("catalog: metadata: %w", err)
	}
	if r, ok := s.blobs.(ReadyChecker); ok {
		if err := r.Ready(ctx); err != nil {
			return fmt.Errorf("catalog: blob store: %w", err)
		}
		return nil
	}
	var probe blob.ID // all zeros: the sha256 of no file
	if _, err := s.blobs.Stat(ctx, probe); err != nil && !errors.Is(err, blob.ErrNotFound) {
		return fmt.Errorf("catalog: blob store: %w", err)
	}
	return nil
}

// ReadyChecker is implemented by a blob store that can tell by itself
// whether it is reachable (localfs: its folder is there; a network store:
// its bucket answers). Ready uses it when the store has it, and otherwise
// looks up a blob that does not exist.
type ReadyChecker interface {
	Ready(ctx context.Context) error
}
