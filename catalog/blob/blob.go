// Package blob defines the store of immutable, content-addressed snapshot
// files (named by the SHA-256 of their bytes) that catalog keeps versions in,
// and the error values every backend returns.
package blob

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"time"
)

// ErrNotFound is returned by a Store for an ID it does not hold.
var ErrNotFound = errors.New("blob not found")

// ErrCorrupt is returned by Store.Put when the bytes given do not
// hash to the ID they are stored under.
var ErrCorrupt = errors.New("blob content does not match its id")

// ID names a blob by the SHA-256 of its bytes.
type ID [sha256.Size]byte

// String returns the ID as 64 lowercase hex digits.
func (id ID) String() string { return hex.EncodeToString(id[:]) }

// IsZero reports whether id is the zero ID.
func (id ID) IsZero() bool { return id == ID{} }

// MarshalText encodes the ID as hex.
func (id ID) MarshalText() ([]byte, error) { return []byte(id.String()), nil }

// UnmarshalText decodes a hex ID.
func (id *ID) UnmarshalText(b []byte) error {
	v, err := ParseID(string(b))
	if err != nil {
		return err
	}
	*id = v
	return nil
}

// ParseID parses 64 hex digits.
func ParseID(s string) (ID, error) {
	var id ID
	if len(s) != 2*sha256.Size {
		return id, fmt.Errorf("blob id: want %d hex digits, got %d", 2*sha256.Size, len(s))
	}
	if _, err := hex.Decode(id[:], []byte(s)); err != nil {
		return id, fmt.Errorf("blob id: %w", err)
	}
	return id, nil
}

// Info describes a stored blob.
type Info struct {
	ID      ID
	Size    int64
	ModTime time.Time
}

// Reader is an open stored blob. It seeks so that HTTP range requests can be
// served from it, and reads at offsets so that Parquet readers can open it
// in place.
type Reader interface {
	io.ReadSeekCloser
	io.ReaderAt
	Size() int64
}

// Store keeps immutable blobs named by the SHA-256 of their bytes. A
// local-disk implementation lives in package localfs; an S3-compatible one
// can implement the same interface. Implementations must be safe for
// concurrent use and must make Put atomic: a blob is visible whole or not
// at all.
type Store interface {
	// Put stores the bytes of r under id. It fails with ErrCorrupt
	// (storing nothing) when the bytes do not hash to id. Putting an id that
	// exists already succeeds without rewriting it.
	Put(ctx context.Context, id ID, r io.Reader) error
	// Open returns the blob for reading, or ErrNotFound.
	Open(ctx context.Context, id ID) (Reader, error)
	// Stat describes the blob, or returns ErrNotFound.
	Stat(ctx context.Context, id ID) (Info, error)
	// List calls fn for every blob, in no particular order, until fn
	// returns an error.
	List(ctx context.Context, fn func(Info) error) error
	// Delete removes the blob; deleting a missing blob is not an error.
	Delete(ctx context.Context, id ID) error
}

// Adopter is implemented by stores that can take a finished local file as
// a blob by moving it into place rather than copying its bytes (localfs,
// when the file is on the store's file system).
type Adopter interface {
	// Adopt makes the file at path the blob id, moving it. It fails with
	// ErrCorrupt (moving nothing) when the file's bytes do not hash to
	// id. It returns false, having moved nothing, when it cannot move the
	// file; the caller then puts it. Adopting an id that exists already
	// succeeds and leaves the file where it is.
	Adopt(ctx context.Context, id ID, path string) (bool, error)
}

// TempSweeper is implemented by stores that write a blob to a temporary
// file before it is put in place (localfs does): a crash mid-write leaves
// that file behind, and SweepTemp removes such files.
type TempSweeper interface {
	// SweepTemp removes the store's temporary files that no Put of this
	// process is writing and that were last modified more than olderThan
	// ago (every such file when olderThan <= 0), or with dryRun only
	// counts them. It reports how many files and bytes it found.
	SweepTemp(ctx context.Context, olderThan time.Duration, dryRun bool) (files int, bytes int64, err error)
}
