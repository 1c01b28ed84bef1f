package catalog

import "unsafe"

// batches hands full batches of rows to a goroutine that writes them, so
// that the writer's work (encoding and compressing a Parquet file, the
// summaries' per-case work) runs on the other core while the caller
// produces the next rows. It holds at most depth+2 batches (one filling,
// depth queued, one being written), so memory stays bounded. Errors of the
// writer come back from the next add or from close.
//
// Writers work in bursts (a Parquet writer compresses a whole row group's
// pages at once when it ends), so a queue of one or a few batches stops
// the caller at each burst and leaves a core idle: every hand-off of the
// ingest between goroutines (these, the merge's and the parser's) is some
// 4-16 batches deep, a few MiB of events in all, by measurement
// (DEVELOPERS.md: the 1M-event ingest against 8a7be85).
type batches[T any] struct {
	cur   []T
	queue chan []T
	free  chan []T
	done  chan error
	err   error
	open  bool
}

func newBatches[T any](size, depth int, write func([]T) error) *batches[T] {
	b := &batches[T]{
		cur:   written(make([]T, 0, size)),
		queue: make(chan []T, depth),
		free:  make(chan []T, depth+1),
		done:  make(chan error, 1),
		open:  true,
	}
	for range depth + 1 {
		b.free <- written(make([]T, 0, size))
	}
	go func() {
		var err error
		for batch := range b.queue {
			if err == nil {
				err = write(batch)
			}
			clear(batch) // drop references
			b.free <- batch[:0]
		}
		b.done <- err
	}()
	return b
}

// written returns s after writing the zero value into each 4 KiB page
// of its backing array. A batch is large, so it comes from memory fresh
// from the system, and its element type holds pointers, so the garbage
// collector may scan it before its first row is written: that read maps
// the kernel's shared zero page, and the first write then faults again,
// copies the page and makes the other core drop the old mapping from its
// TLB (an interrupt). Written first, each page costs one fault (a perf
// profile of a 1M-event upload: 0.56% of the server's CPU in those
// copies under the merges' batches).
func written[T any](s []T) []T {
	var zero T
	step := max(1, 4096/int(unsafe.Sizeof(zero)))
	all := s[:cap(s)]
	for i := 0; i < len(all); i += step {
		all[i] = zero
	}
	return s
}

// add appends v, handing the batch on when it is full.
func (b *batches[T]) add(v T) error {
	b.cur = append(b.cur, v)
	if len(b.cur) == cap(b.cur) {
		return b.flush()
	}
	return nil
}

// flush hands the current batch on, if it holds anything.
func (b *batches[T]) flush() error {
	if len(b.cur) == 0 {
		return nil
	}
	select {
	case err := <-b.done: // the writer stopped early: it failed
		b.open, b.err = false, err
		return err
	default:
	}
	b.queue <- b.cur
	b.cur = <-b.free
	return nil
}

// close writes what is left and waits for the writer; it returns the
// first write error. It may be called more than once.
func (b *batches[T]) close() error {
	if !b.open {
		return b.err
	}
	ferr := b.flush()
	if b.open {
		close(b.queue)
		b.err = <-b.done
		b.open = false
	}
	if b.err == nil {
		b.err = ferr
	}
	return b.err
}
