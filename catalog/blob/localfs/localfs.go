// Package localfs is the local-disk blob.Store: each blob is a read-only
// file named by its SHA-256 under a fan-out of two hex digits, written to a
// temporary file (tmp/put-*), synced and renamed into place so it exists
// whole or not at all. A crash mid-write leaves the temporary file;
// SweepTemp removes it.
package localfs

import (
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// Store keeps blobs under a root directory.
type Store struct {
	root string

	mu       sync.Mutex
	inflight map[string]bool // temporary files Put is writing
}

// New returns a Store rooted at dir, creating it if needed.
func New(dir string) (*Store, error) {
	if err := os.MkdirAll(filepath.Join(dir, "tmp"), 0o700); err != nil {
		return nil, fmt.Errorf("localfs: %w", err)
	}
	return &Store{root: dir, inflight: map[string]bool{}}, nil
}

func (s *Store) path(id blob.ID) string {
	h := id.String()
	return filepath.Join(s.root, "sha256", h[:2], h)
}

// Put implements blob.Store.
func (s *Store) Put(ctx context.Context, id blob.ID, r io.Reader) error {
	dst := s.path(id)
	if _, err := os.Stat(dst); err == nil {
		return nil
	}
	s.mu.Lock()
	tmp, err := os.CreateTemp(filepath.Join(s.root, "tmp"), tempPrefix+"*")
	if err == nil {
		s.inflight[filepath.Base(tmp.Name())] = true
	}
	s.mu.Unlock()
	if err != nil {
		return fmt.Errorf("localfs: %w", err)
	}
	defer func() {
		tmp.Close()
		os.Remove(tmp.Name()) // no-op after a successful rename
		s.mu.Lock()
		delete(s.inflight, filepath.Base(tmp.Name()))
		s.mu.Unlock()
	}()
	h := sha256.New()
	if _, err := io.Copy(io.MultiWriter(tmp, h), ctxReader{ctx, r}); err != nil {
		return fmt.Errorf("localfs: put %s: %w", id, err)
	}
	if got := blob.ID(h.Sum(nil)); got != id {
		return fmt.Errorf("localfs: put %s: got %s: %w", id, got, blob.ErrCorrupt)
	}
	if err := tmp.Chmod(0o444); err != nil {
		return fmt.Errorf("localfs: %w", err)
	}
	if err := tmp.Sync(); err != nil {
		return fmt.Errorf("localfs: %w", err)
	}
	if err := tmp.Close(); err != nil {
		return fmt.Errorf("localfs: %w", err)
	}
	if err := os.MkdirAll(filepath.Dir(dst), 0o700); err != nil {
		return fmt.Errorf("localfs: %w", err)
	}
	if err := os.Rename(tmp.Name(), dst); err != nil {
		return fmt.Errorf("localfs: %w", err)
	}
	return syncDir(filepath.Dir(dst))
}

// Adopt implements blob.Adopter: the file at path, once its bytes are
// checked against id and synced, is renamed into place. A file on another
// file system is left where it is (false).
func (s *Store) Adopt(ctx context.Context, id blob.ID, path string) (bool, error) {
	dst := s.path(id)
	if _, err := os.Stat(dst); err == nil {
		return true, nil
	}
	f, err := os.Open(path)
	if err != nil {
		return false, fmt.Errorf("localfs: %w", err)
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, ctxReader{ctx, f}); err != nil {
		return false, fmt.Errorf("localfs: adopt %s: %w", id, err)
	}
	if got := blob.ID(h.Sum(nil)); got != id {
		return false, fmt.Errorf("localfs: adopt %s: got %s: %w", id, got, blob.ErrCorrupt)
	}
	if err := f.Chmod(0o444); err != nil {
		return false, fmt.Errorf("localfs: %w", err)
	}
	if err := f.Sync(); err != nil {
		return false, fmt.Errorf("localfs: %w", err)
	}
	if err := os.MkdirAll(filepath.Dir(dst), 0o700); err != nil {
		return false, fmt.Errorf("localfs: %w", err)
	}
	if err := os.Rename(path, dst); err != nil {
		if errors.Is(err, syscall.EXDEV) {
			return false, f.Chmod(0o600)
		}
		return false, fmt.Errorf("localfs: %w", err)
	}
	return true, syncDir(filepath.Dir(dst))
}

// tempPrefix starts the name of every temporary file of a Put.
const tempPrefix = "put-"

// SweepTemp implements blob.TempSweeper: it removes the files under
// tmp/ that no Put of this Store is writing, last modified more than
// olderThan ago. Another process writing to the same folder is covered by
// olderThan only.
func (s *Store) SweepTemp(ctx context.Context, olderThan time.Duration, dryRun bool) (files int, bytes int64, err error) {
	dir := filepath.Join(s.root, "tmp")
	ents, err := os.ReadDir(dir)
	if err != nil {
		return 0, 0, fmt.Errorf("localfs: %w", err)
	}
	now := time.Now()
	for _, e := range ents {
		if err := ctx.Err(); err != nil {
			return files, bytes, err
		}
		if e.IsDir() {
			continue
		}
		fi, err := e.Info()
		if err != nil {
			continue // removed meanwhile
		}
		if olderThan > 0 && now.Sub(fi.ModTime()) < olderThan {
			continue
		}
		s.mu.Lock()
		busy := s.inflight[e.Name()]
		if !busy && !dryRun {
			err = os.Remove(filepath.Join(dir, e.Name()))
		}
		s.mu.Unlock()
		if busy || errors.Is(err, fs.ErrNotExist) {
			continue
		}
		if err != nil {
			return files, bytes, fmt.Errorf("localfs: %w", err)
		}
		files++
		bytes += fi.Size()
	}
	return files, bytes, nil
}

// Open implements blob.Store.
func (s *Store) Open(ctx context.Context, id blob.ID) (blob.Reader, error) {
	f, err := openRead(s.path(id))
	if errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("localfs: %s: %w", id, blob.ErrNotFound)
	}
	if err != nil {
		return nil, fmt.Errorf("localfs: %w", err)
	}
	fi, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("localfs: %w", err)
	}
	return &file{File: f, size: fi.Size()}, nil
}

// Stat implements blob.Store.
func (s *Store) Stat(ctx context.Context, id blob.ID) (blob.Info, error) {
	fi, err := os.Stat(s.path(id))
	if errors.Is(err, fs.ErrNotExist) {
		return blob.Info{}, fmt.Errorf("localfs: %s: %w", id, blob.ErrNotFound)
	}
	if err != nil {
		return blob.Info{}, fmt.Errorf("localfs: %w", err)
	}
	return blob.Info{ID: id, Size: fi.Size(), ModTime: fi.ModTime()}, nil
}

// List implements blob.Store.
func (s *Store) List(ctx context.Context, fn func(blob.Info) error) error {
	root := filepath.Join(s.root, "sha256")
	err := filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if errors.Is(err, fs.ErrNotExist) && p == root {
			return filepath.SkipDir
		}
		if err != nil {
			return err
		}
		if err := ctx.Err(); err != nil {
			return err
		}
		if d.IsDir() || strings.HasPrefix(d.Name(), ".") {
			return nil
		}
		id, err := blob.ParseID(d.Name())
		if err != nil {
			return nil // not ours
		}
		fi, err := d.Info()
		if errors.Is(err, fs.ErrNotExist) {
			// Deleted since the directory was read (a commit dropping
			// the case groups it replaced): not there to list.
			return nil
		}
		if err != nil {
			return err
		}
		return fn(blob.Info{ID: id, Size: fi.Size(), ModTime: fi.ModTime()})
	})
	if err != nil {
		return fmt.Errorf("localfs: %w", err)
	}
	return nil
}

// Delete implements blob.Store.
func (s *Store) Delete(ctx context.Context, id blob.ID) error {
	err := os.Remove(s.path(id))
	if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("localfs: %w", err)
	}
	return nil
}

type file struct {
	*os.File
	size int64
}

func (f *file) Size() int64 { return f.size }

// ctxReader stops a copy when its context ends.
type ctxReader struct {
	ctx context.Context
	r   io.Reader
}

func (c ctxReader) Read(p []byte) (int, error) {
	if err := c.ctx.Err(); err != nil {
		return 0, err
	}
	return c.r.Read(p)
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return fmt.Errorf("localfs: %w", err)
	}
	defer d.Close()
	if err := d.Sync(); err != nil {
		return fmt.Errorf("localfs: sync %s: %w", dir, err)
	}
	return nil
}
