package localfs_test

import (
	"bytes"
	"context"
	"crypto/sha256"
	"errors"
	"io"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob"

	"github.com/flowcat-catalog/flowcat/catalog/blob/blobtest"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
)

func TestConformance(t *testing.T) {
	dir := t.TempDir()
	s, err := localfs.New(dir)
	if err != nil {
		t.Fatal(err)
	}
	blobtest.Run(t, s)
	// No temporary file outlives a Put, failed or not.
	left, _ := os.ReadDir(filepath.Join(dir, "tmp"))
	if len(left) != 0 {
		t.Errorf("temporary files left: %v", left)
	}
}

// gate is a reader that gives n bytes, then waits for release.
type gate struct {
	n       int
	started chan struct{}
	release chan struct{}
}

func (g *gate) Read(p []byte) (int, error) {
	if g.n == 0 {
		close(g.started)
		<-g.release
		return 0, io.EOF
	}
	k := min(len(p), g.n)
	for i := range k {
		p[i] = 'x'
	}
	g.n -= k
	return k, nil
}

// TestSweepTemp: a leftover put-* file (what a crash mid-write leaves) is
// swept by age, while the file of a Put in progress is never touched.
func TestSweepTemp(t *testing.T) {
	dir := t.TempDir()
	s, err := localfs.New(dir)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	old := filepath.Join(dir, "tmp", "put-left-by-a-crash")
	young := filepath.Join(dir, "tmp", "put-young")
	for _, p := range []string{old, young} {
		if err := os.WriteFile(p, []byte("partial"), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	past := time.Now().Add(-2 * time.Hour)
	if err := os.Chtimes(old, past, past); err != nil {
		t.Fatal(err)
	}
	// A Put in progress: its temp file exists and is young.
	g := &gate{n: 1000, started: make(chan struct{}), release: make(chan struct{})}
	body := bytes.Repeat([]byte("x"), 1000)
	id := blob.ID(sha256.Sum256(body))
	done := make(chan error, 1)
	go func() { done <- s.Put(ctx, id, g) }()
	<-g.started

	n, b, err := s.SweepTemp(ctx, time.Hour, true)
	if err != nil || n != 1 || b != 7 {
		t.Errorf("dry run over an hour: %d files, %d bytes, %v; want 1, 7", n, b, err)
	}
	if _, err := os.Stat(old); err != nil {
		t.Errorf("dry run removed %s", old)
	}
	if n, _, err := s.SweepTemp(ctx, time.Hour, false); err != nil || n != 1 {
		t.Errorf("sweep over an hour: %d files, %v; want 1", n, err)
	}
	if n, _, err := s.SweepTemp(ctx, 0, false); err != nil || n != 1 {
		t.Errorf("sweep of all: %d files, %v; want 1 (the young leftover, not the Put's)", n, err)
	}
	close(g.release)
	if err := <-done; err != nil {
		t.Fatalf("Put during sweeps: %v", err)
	}
	if left, _ := os.ReadDir(filepath.Join(dir, "tmp")); len(left) != 0 {
		t.Errorf("temporary files left: %v", left)
	}
	if _, err := s.Stat(ctx, id); err != nil {
		t.Errorf("blob put during the sweeps: %v", err)
	}
}

// TestAdopt: a file whose bytes hash to the id is moved into place and
// read back as the blob; one that does not is refused with ErrCorrupt and
// stays where it was; an id stored already leaves the file alone; a file
// on another file system (tmpfs /dev/shm, where there is one) is left for
// the caller to put.
func TestAdopt(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	s, err := localfs.New(dir)
	if err != nil {
		t.Fatal(err)
	}
	write := func(dir, body string) string {
		f, err := os.CreateTemp(dir, "adopt-*")
		if err != nil {
			t.Fatal(err)
		}
		if _, err := f.WriteString(body); err != nil {
			t.Fatal(err)
		}
		f.Close()
		return f.Name()
	}
	body := "events framed for the store"
	id := blob.ID(sha256.Sum256([]byte(body)))

	bad := write(dir, body+"!")
	if ok, err := s.Adopt(ctx, id, bad); ok || !errors.Is(err, blob.ErrCorrupt) {
		t.Fatalf("adopting bytes of another id: %v, %v; want ErrCorrupt", ok, err)
	}
	if _, err := os.Stat(bad); err != nil {
		t.Fatalf("the refused file moved: %v", err)
	}
	if _, err := s.Stat(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Fatalf("a refused adoption stored the blob: %v", err)
	}

	good := write(dir, body)
	if ok, err := s.Adopt(ctx, id, good); !ok || err != nil {
		t.Fatalf("Adopt: %v, %v", ok, err)
	}
	if _, err := os.Stat(good); !errors.Is(err, os.ErrNotExist) {
		t.Fatalf("the adopted file is still at its old path: %v", err)
	}
	r, err := s.Open(ctx, id)
	if err != nil {
		t.Fatal(err)
	}
	got, _ := io.ReadAll(io.NewSectionReader(r, 0, r.Size()))
	r.Close()
	if string(got) != body {
		t.Fatalf("adopted blob reads %q, want %q", got, body)
	}

	again := write(dir, body)
	if ok, err := s.Adopt(ctx, id, again); !ok || err != nil {
		t.Fatalf("adopting an id stored already: %v, %v", ok, err)
	}

	if st, err := os.Stat("/dev/shm"); err == nil && st.IsDir() {
		other := write("/dev/shm", "another file system")
		defer os.Remove(other)
		oid := blob.ID(sha256.Sum256([]byte("another file system")))
		if !sameDevice(t, "/dev/shm", dir) {
			if ok, err := s.Adopt(ctx, oid, other); ok || err != nil {
				t.Fatalf("adopting across file systems: %v, %v; want false, nil", ok, err)
			}
			if _, err := os.Stat(other); err != nil {
				t.Fatalf("the file on another file system moved: %v", err)
			}
		}
	}
}
