package localfs_test

import (
	"os"
	"path/filepath"
	"testing"

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
