package localfs_test

import (
	"bytes"
	"context"
	"crypto/sha256"
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
