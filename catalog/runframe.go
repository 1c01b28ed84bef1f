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
func newRunWriter(w io.Writer) *s2.Writer {
	return s2.NewWriter(w, s2.WriterBlockSize(runBlock), s2.WriterConcurrency(2))
}

// newRunReader returns a buffered reader of the events framed in r.
func newRunReader(r io.Reader) *bufio.Reader {
	return bufio.NewReaderSize(s2.NewReader(r, s2.ReaderMaxBlockSize(runBlock)), 16<<10)
}
