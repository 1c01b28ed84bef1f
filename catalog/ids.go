package catalog

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"strconv"
	"strings"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// SnapshotID names a version by the SHA-256 of its manifest's canonical
// bytes, as stored at commit.
type SnapshotID [sha256.Size]byte

// SnapshotOf returns the snapshot id of canonical manifest bytes.
func SnapshotOf(manifest []byte) SnapshotID { return sha256.Sum256(manifest) }

// String returns the id as 64 lowercase hex digits, written as a blob id
// is (both are SHA-256 sums; the types keep them apart).
func (id SnapshotID) String() string { return blob.ID(id).String() }

// IsZero reports whether id is the zero id.
func (id SnapshotID) IsZero() bool { return blob.ID(id).IsZero() }

// MarshalText encodes the id as hex.
func (id SnapshotID) MarshalText() ([]byte, error) { return blob.ID(id).MarshalText() }

// UnmarshalText decodes a hex id.
func (id *SnapshotID) UnmarshalText(b []byte) error {
	v, err := ParseSnapshotID(string(b))
	if err != nil {
		return err
	}
	*id = v
	return nil
}

// ParseSnapshotID parses 64 hex digits (either case).
func ParseSnapshotID(s string) (SnapshotID, error) {
	var id SnapshotID
	if len(s) != 2*sha256.Size {
		return id, fmt.Errorf("snapshot id: want %d hex digits, got %d: %w", 2*sha256.Size, len(s), ErrInvalid)
	}
	if _, err := hex.Decode(id[:], []byte(strings.ToLower(s))); err != nil {
		return id, fmt.Errorf("snapshot id: not hex: %w", ErrInvalid)
	}
	return id, nil
}

// UploadID names an upload within its dataset: "u" and its sequence
// number from 1.
type UploadID string

// UploadIDOf returns the id of a dataset's seq-th upload.
func UploadIDOf(seq int) UploadID { return UploadID("u" + strconv.Itoa(seq)) }

// String returns the id as written.
func (id UploadID) String() string { return string(id) }

// Seq returns the upload's sequence number, 0 for a malformed id.
func (id UploadID) Seq() int {
	n, err := strconv.Atoi(strings.TrimPrefix(string(id), "u"))
	if err != nil || !strings.HasPrefix(string(id), "u") || n < 1 {
		return 0
	}
	return n
}

// ParseUploadID parses "u" followed by a positive decimal number without
// leading zeros.
func ParseUploadID(s string) (UploadID, error) {
	id := UploadID(s)
	if n := id.Seq(); n == 0 || UploadIDOf(n) != id {
		return "", fmt.Errorf("upload id %q: want u and a number from 1: %w", truncate(s, 80), ErrInvalid)
	}
	return id, nil
}

// DatasetRef names a dataset as "project/dataset".
type DatasetRef struct {
	Project string
	Name    string
}

// String returns "project/dataset".
func (r DatasetRef) String() string { return r.Project + "/" + r.Name }

// MarshalText encodes the reference as "project/dataset".
func (r DatasetRef) MarshalText() ([]byte, error) { return []byte(r.String()), nil }

// UnmarshalText decodes "project/dataset".
func (r *DatasetRef) UnmarshalText(b []byte) error {
	v, err := ParseDatasetRef(string(b))
	if err != nil {
		return err
	}
	*r = v
	return nil
}

// ParseDatasetRef parses "project/dataset", each part a valid name.
func ParseDatasetRef(s string) (DatasetRef, error) {
	p, d, ok := strings.Cut(s, "/")
	if !ok {
		return DatasetRef{}, fmt.Errorf("dataset %q: want project/dataset: %w", truncate(s, 80), ErrInvalid)
	}
	if err := ValidName("project", p); err != nil {
		return DatasetRef{}, err
	}
	if err := ValidName("dataset", d); err != nil {
		return DatasetRef{}, err
	}
	return DatasetRef{Project: p, Name: d}, nil
}
