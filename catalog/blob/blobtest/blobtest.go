// Package blobtest is the conformance suite every blob.Store backend runs
// from its own tests, so that local disk and later backends behave alike.
package blobtest

import (
	"bytes"
	"context"
	"crypto/sha256"
	"errors"
	"io"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// Run exercises a fresh, empty store s.
func Run(t *testing.T, s blob.Store) {
	ctx := context.Background()
	data := []byte("snapshot bytes\n")
	id := blob.ID(sha256.Sum256(data))

	if _, err := s.Stat(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Fatalf("Stat of missing blob: got %v, want ErrNotFound", err)
	}
	if _, err := s.Open(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Fatalf("Open of missing blob: got %v, want ErrNotFound", err)
	}
	// Bytes that do not match their id are refused and leave nothing.
	if err := s.Put(ctx, id, strings.NewReader("other bytes")); !errors.Is(err, blob.ErrCorrupt) {
		t.Fatalf("Put with wrong content: got %v, want ErrCorrupt", err)
	}
	if _, err := s.Stat(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Fatalf("corrupt Put left a blob: %v", err)
	}
	if err := s.Put(ctx, id, bytes.NewReader(data)); err != nil {
		t.Fatal(err)
	}
	if err := s.Put(ctx, id, bytes.NewReader(data)); err != nil {
		t.Fatalf("second Put of same id: %v", err)
	}
	info, err := s.Stat(ctx, id)
	if err != nil || info.Size != int64(len(data)) || info.ID != id {
		t.Fatalf("Stat = %+v, %v", info, err)
	}
	r, err := s.Open(ctx, id)
	if err != nil {
		t.Fatal(err)
	}
	if r.Size() != int64(len(data)) {
		t.Errorf("Size = %d", r.Size())
	}
	if _, err := r.Seek(9, io.SeekStart); err != nil {
		t.Fatal(err)
	}
	rest, _ := io.ReadAll(r)
	r.Close()
	if string(rest) != "bytes\n" {
		t.Errorf("read after seek = %q", rest)
	}
	var listed []blob.ID
	if err := s.List(ctx, func(i blob.Info) error { listed = append(listed, i.ID); return nil }); err != nil {
		t.Fatal(err)
	}
	if len(listed) != 1 || listed[0] != id {
		t.Errorf("List = %v", listed)
	}
	if err := s.Delete(ctx, id); err != nil {
		t.Fatal(err)
	}
	if err := s.Delete(ctx, id); err != nil {
		t.Fatalf("Delete of missing blob: %v", err)
	}
	if _, err := s.Stat(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Fatalf("Stat after Delete: %v", err)
	}
}
