package catalog

import (
	"bytes"
	"io"
	"math/rand/v2"
	"testing"

	"github.com/klauspost/compress/s2"
)

// TestRunWriterBytes: records gathered into blocks before the S2 writer
// frame to the same bytes as records handed to it one by one (the case
// groups' event blobs are stored, and their ids are their bytes), and
// read back as written, across Reset and records longer than a block.
func TestRunWriterBytes(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	var recs [][]byte
	for i := range 5000 {
		n := 1 + rng.IntN(200)
		if i%997 == 0 {
			n = runBlock + rng.IntN(3*runBlock) // longer than a block
		}
		r := make([]byte, n)
		for j := range r {
			r[j] = byte('a' + rng.IntN(6)) // compressible, as records are
		}
		recs = append(recs, r)
	}
	var want, got bytes.Buffer
	plain := s2.NewWriter(&want, s2.WriterBlockSize(runBlock), s2.WriterConcurrency(2))
	for _, r := range recs {
		if _, err := plain.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if err := plain.Close(); err != nil {
		t.Fatal(err)
	}
	w := newRunWriter(io.Discard)
	w.Write([]byte("dropped by the reset"))
	w.Reset(&got)
	for _, r := range recs {
		if n, err := w.Write(r); err != nil || n != len(r) {
			t.Fatalf("Write: %d, %v", n, err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got.Bytes(), want.Bytes()) {
		t.Fatalf("framed %d bytes, the S2 writer alone %d (or other bytes)", got.Len(), want.Len())
	}
	back, err := io.ReadAll(newRunReader(&got))
	if err != nil || !bytes.Equal(back, bytes.Join(recs, nil)) {
		t.Fatalf("read back %d bytes (%v), wrote %d", len(back), err, len(bytes.Join(recs, nil)))
	}
}
