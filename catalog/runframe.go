package catalog

import (
	"bufio"
	"io"

	"github.com/klauspost/compress/s2"
)

// Every stream of events in the run format (sort.go), the sorter's
// spilled runs and the case groups' event blobs alike, is framed in
// blocks of runBlock bytes compressed with S2 (klauspost/compress/s2, a
// Snappy-compatible block codec with CRC-32C per block): a third of the
// bytes to write, sync, copy and read back, for less CPU than the bytes
// saved cost in system calls. newRunWriter and newRunReader are the only
// writer and reader of that framing.
const runBlock = 64 << 10

// newRunWriter returns a writer of the framing over w; its Close writes
// what it buffers (it does not close w). Blocks are compressed and
// written to w on two goroutines of the writer's own, so the caller's
// goroutine only encodes: a write error comes back from a later Write or
// from Close. It holds at most a few blocks.
func newRunWriter(w io.Writer) *runWriter {
	return &runWriter{s: s2.NewWriter(w, s2.WriterBlockSize(runBlock), s2.WriterConcurrency(2)), b: make([]byte, 0, runBlock)}
}

// runWriter gathers the records it is given into a block and hands the
// S2 writer whole blocks: each Write of the S2 writer takes its error's
// mutex twice, which for one record at a time (about 100 bytes) was
// about 1% of an upload's CPU. It cuts blocks where the S2 writer given
// the records one by one would (a full block when the next record does
// not fit; a record longer than a block, met with nothing buffered,
// written whole), so the framed bytes are the same (TestRunWriterBytes):
// the case groups' event blobs are stored, and their ids are their bytes.
type runWriter struct {
	s *s2.Writer
	b []byte
}

func (w *runWriter) Write(p []byte) (int, error) {
	n := len(p)
	for len(p) > cap(w.b)-len(w.b) {
		if len(w.b) == 0 {
			_, err := w.s.Write(p) // the S2 writer's buffer is empty too: p goes whole
			return n, err
		}
		k := cap(w.b) - len(w.b)
		w.b = append(w.b, p[:k]...)
		p = p[k:]
		if _, err := w.s.Write(w.b); err != nil { // fills its buffer
			return 0, err
		}
		w.b = w.b[:0]
		if err := w.s.AsyncFlush(); err != nil { // and sends it as one block
			return 0, err
		}
	}
	w.b = append(w.b, p...)
	return n, nil
}

// Close writes what is buffered and ends the stream.
func (w *runWriter) Close() error {
	var err error
	if len(w.b) > 0 {
		_, err = w.s.Write(w.b)
		w.b = w.b[:0]
	}
	if cerr := w.s.Close(); err == nil {
		err = cerr
	}
	return err
}

// Reset drops what is buffered and starts a stream over to.
func (w *runWriter) Reset(to io.Writer) {
	w.b = w.b[:0]
	w.s.Reset(to)
}

// newRunReader returns a buffered reader of the events framed in r.
func newRunReader(r io.Reader) *bufio.Reader {
	return bufio.NewReaderSize(s2.NewReader(r, s2.ReaderMaxBlockSize(runBlock)), 16<<10)
}
