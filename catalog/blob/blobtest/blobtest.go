// Package blobtest is the conformance suite every blob.Store backend runs
// from its own tests, so that local disk and later backends behave alike.
package blobtest

import (
	"bytes"
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
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
	runLarge(t, s)
}

// LargeSize is the size of the large blob of the suite: more than two
// parts of the smallest S3 multipart part (5 MiB), ending in a short part.
const LargeSize = 12<<20 + 7

// failingReader gives n bytes of b, then fails as a dropped connection
// would.
type failingReader struct {
	b []byte
	n int
}

var errDropped = errors.New("connection dropped (test)")

func (f *failingReader) Read(p []byte) (int, error) {
	if f.n == 0 {
		return 0, errDropped
	}
	k := copy(p, f.b[:min(len(f.b), f.n)])
	f.b, f.n = f.b[k:], f.n-k
	return k, nil
}

// runLarge puts a blob larger than a multipart part: a wrong last byte and
// a read that fails midway store nothing; the right bytes read back whole,
// at offsets across part boundaries.
func runLarge(t *testing.T, s blob.Store) {
	ctx := context.Background()
	big := make([]byte, LargeSize)
	rng := rand.New(rand.NewChaCha8([32]byte{1, 6}))
	for i := range big {
		big[i] = byte(rng.Uint32())
	}
	id := blob.ID(sha256.Sum256(big))
	bad := bytes.Clone(big)
	bad[len(bad)-1] ^= 1
	if err := s.Put(ctx, id, bytes.NewReader(bad)); !errors.Is(err, blob.ErrCorrupt) {
		t.Fatalf("large Put with a wrong last byte: got %v, want ErrCorrupt", err)
	}
	if _, err := s.Stat(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Fatalf("corrupt large Put left a blob: %v", err)
	}
	if err := s.Put(ctx, id, &failingReader{b: big, n: 11 << 20}); !errors.Is(err, errDropped) {
		t.Fatalf("large Put whose reader fails: got %v, want the reader's error", err)
	}
	if _, err := s.Stat(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Fatalf("failed large Put left a blob: %v", err)
	}
	cctx, cancel := context.WithCancel(ctx)
	cancel()
	if err := s.Put(cctx, id, bytes.NewReader(big)); !errors.Is(err, context.Canceled) {
		t.Fatalf("large Put with a cancelled context: got %v, want context.Canceled", err)
	}
	if _, err := s.Stat(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Fatalf("cancelled large Put left a blob: %v", err)
	}
	if err := s.Put(ctx, id, bytes.NewReader(big)); err != nil {
		t.Fatalf("large Put: %v", err)
	}
	r, err := s.Open(ctx, id)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if r.Size() != LargeSize {
		t.Fatalf("large Size = %d, want %d", r.Size(), LargeSize)
	}
	for _, off := range []int64{0, 5<<20 - 3, 8<<20 - 5, LargeSize - 10} {
		p := make([]byte, 10)
		if n, err := r.ReadAt(p, off); n != 10 || (err != nil && err != io.EOF) {
			t.Fatalf("ReadAt(%d) = %d, %v", off, n, err)
		}
		if !bytes.Equal(p, big[off:off+10]) {
			t.Errorf("ReadAt(%d) = %x, want %x", off, p, big[off:off+10])
		}
	}
	h := sha256.New()
	if _, err := r.Seek(0, io.SeekStart); err != nil {
		t.Fatal(err)
	}
	if n, err := io.Copy(h, r); err != nil || n != LargeSize {
		t.Fatalf("read of the large blob: %d bytes, %v", n, err)
	}
	if got := blob.ID(h.Sum(nil)); got != id {
		t.Fatalf("large blob read back as %s, want %s", got, id)
	}
	var listed []string
	if err := s.List(ctx, func(i blob.Info) error { listed = append(listed, fmt.Sprint(i.ID, " ", i.Size)); return nil }); err != nil {
		t.Fatal(err)
	}
	if want := fmt.Sprint(id, " ", LargeSize); len(listed) != 1 || listed[0] != want {
		t.Errorf("List = %v, want [%s]", listed, want)
	}
	if err := s.Delete(ctx, id); err != nil {
		t.Fatal(err)
	}
}
