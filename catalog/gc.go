package catalog

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// DefaultGCGrace is how old an unreferenced blob must be before the
// collector deletes it, unless GCOptions says otherwise.
const DefaultGCGrace = time.Hour

// GCOptions tune CollectGarbage.
type GCOptions struct {
	// DryRun lists what would be deleted and deletes nothing.
	DryRun bool
	// Grace spares unreferenced blobs modified less than this long ago.
	// Blobs of uploads in progress in this process are always spared; the
	// grace also covers another writer sharing the blob store. Zero means
	// DefaultGCGrace; a negative value means no grace.
	Grace time.Duration
}

// GCResult says what a collection found and did.
type GCResult struct {
	Blobs        int       `json:"blobs"`         // blobs in the store
	Referenced   int       `json:"referenced"`    // blobs some version lists
	Pending      int       `json:"pending"`       // unreferenced but held by an upload in progress
	Young        int       `json:"young"`         // unreferenced but within the grace period
	Deleted      []blob.ID `json:"deleted"`       // deleted (or, in a dry run, to be deleted)
	DeletedBytes int64     `json:"deleted_bytes"` // their total size
	DryRun       bool      `json:"dry_run"`
	// Temporary files of blob writes that never finished (a crash or a
	// failed clean-up), past the grace period: deleted (or, in a dry run,
	// to be deleted).
	Temporaries    int   `json:"temporaries"`
	TemporaryBytes int64 `json:"temporary_bytes"`
}

// CollectGarbage deletes the blobs no version of any dataset references:
// files left by a crash or a failed commit between the blob and the
// version, and the files of deleted datasets. Every version of a dataset
// not deleted, retracted ones included, keeps its files. It
// also deletes the blob store's temporary files older than the grace
// period that no write in progress holds (blob.TempSweeper).
//
// Safety against a concurrent upload: an upload holds each blob it makes
// from before the put until after the version that lists it is committed.
// The collector decides and deletes while no hold can be taken or released,
// against the referenced set read at that moment; see the comment inside.
func (s *Store) CollectGarbage(ctx context.Context, opt GCOptions, by string) (*GCResult, error) {
	grace := opt.Grace
	if grace == 0 {
		grace = DefaultGCGrace
	}
	res := &GCResult{DryRun: opt.DryRun, Deleted: []blob.ID{}}
	var all []blob.Info
	err := s.blobs.List(ctx, func(info blob.Info) error {
		all = append(all, info)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("gc: %w", err)
	}
	res.Blobs = len(all)
	if testHookGCBetween != nil {
		testHookGCBetween()
	}
	// The decision is made holding s.mu, so no upload can take or release
	// a hold meanwhile: a blob not held now is either not yet put by its
	// upload (which then puts it again after a delete) or committed, and
	// so in the referenced set read now.
	s.mu.Lock()
	defer s.mu.Unlock()
	refs, err := s.referenced()
	if err != nil {
		return nil, err
	}
	now := s.opt.Now()
	var doomed []blob.Info
	for _, info := range all {
		switch {
		case refs[info.ID]:
			res.Referenced++
		case s.pending[info.ID] > 0:
			res.Pending++
		case grace > 0 && now.Sub(info.ModTime) < grace:
			res.Young++
		default:
			// A commit may have deleted the groups it replaced since
			// the listing (dropGroups): those are gone, not collected.
			if _, err := s.blobs.Stat(ctx, info.ID); errors.Is(err, blob.ErrNotFound) {
				res.Blobs--
				continue
			}
			doomed = append(doomed, info)
		}
	}
	for _, info := range doomed {
		if !opt.DryRun {
			if err := s.blobs.Delete(ctx, info.ID); err != nil {
				return res, fmt.Errorf("gc: %w", err)
			}
		}
		res.Deleted = append(res.Deleted, info.ID)
		res.DeletedBytes += info.Size
	}
	if sw, ok := s.blobs.(blob.TempSweeper); ok {
		n, b, err := sw.SweepTemp(ctx, max(grace, 0), opt.DryRun)
		if err != nil {
			return res, fmt.Errorf("gc: %w", err)
		}
		res.Temporaries, res.TemporaryBytes = n, b
	}
	if !opt.DryRun && len(doomed)+res.Temporaries > 0 {
		err := s.db.Update(func(tx *bolt.Tx) error {
			return auditCtx(ctx, tx, now, by, "gc", fmt.Sprintf("%d blobs, %d bytes; %d temporary files, %d bytes", len(doomed), res.DeletedBytes, res.Temporaries, res.TemporaryBytes))
		})
		if err != nil {
			return res, err
		}
	}
	s.opt.Logger.Info("garbage collected", "blobs", res.Blobs, "referenced", res.Referenced,
		"deleted", len(res.Deleted), "bytes", res.DeletedBytes, "temporaries", res.Temporaries, "dry_run", opt.DryRun)
	return res, nil
}

// testHookGCBetween, when set by a test, runs between listing the blobs
// and deciding which to delete.
var testHookGCBetween func()

// referenced returns every blob a version's manifest lists (Blobs) and
// those of the datasets' case groups, except those of deleted datasets.
func (s *Store) referenced() (map[blob.ID]bool, error) {
	refs := map[blob.ID]bool{}
	err := s.db.View(func(tx *bolt.Tx) error {
		deleted, err := deletedDatasets(tx)
		if err != nil {
			return fmt.Errorf("gc: %w", err)
		}
		if err := groupBlobs(tx, deleted, refs); err != nil {
			return err
		}
		return tx.Bucket(bucketManifests).ForEach(func(k, b []byte) error {
			var m Manifest
			if err := json.Unmarshal(b, &m); err != nil {
				return fmt.Errorf("gc: manifest %s: %w", k, err)
			}
			if deleted[m.Dataset] {
				return nil
			}
			for _, f := range m.Blobs() {
				refs[f.SHA256] = true
			}
			return nil
		})
	})
	return refs, err
}
