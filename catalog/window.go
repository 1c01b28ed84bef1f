package catalog

import "github.com/flowcat-catalog/flowcat/schema"

// The held filter's two windows (held.go): the upload's events near the
// current instant whose identity repeats in the upload (eventWindow), and
// the held events near it whose identity the upload may have
// (heldWindow). Both are queues in time order with an index by identity
// hash; their entries and records sit in chunks freed as the window passes
// them, so a window's memory is what it holds and one chunk of each kind,
// never twice its size, and nothing in them holds a pointer the collector
// scans.

// chunkQueue is a queue of T numbered by sequence from 0, held in chunks
// of queueChunk; the chunks before the head's are freed (one is kept for
// reuse).
type chunkQueue[T any] struct {
	chunks [][]T // chunks[0][0] is number first
	first  int64
	head   int64 // the oldest in the queue
	next   int64 // the number of the next pushed
	spare  []T
}

const queueChunk = 4096

func (q *chunkQueue[T]) at(seq int64) *T {
	i := seq - q.first
	return &q.chunks[i/queueChunk][i%queueChunk]
}

func (q *chunkQueue[T]) len() int { return int(q.next - q.head) }

// push appends x and returns its number.
func (q *chunkQueue[T]) push(x T) int64 {
	if q.next-q.first == int64(len(q.chunks))*queueChunk {
		c := q.spare
		if c == nil {
			c = make([]T, queueChunk)
		}
		q.spare = nil
		q.chunks = append(q.chunks, c)
	}
	*q.at(q.next) = x
	q.next++
	return q.next - 1
}

// front returns the oldest, or nil when empty.
func (q *chunkQueue[T]) front() *T {
	if q.head == q.next {
		return nil
	}
	return q.at(q.head)
}

// pop drops the oldest.
func (q *chunkQueue[T]) pop() {
	q.head++
	if q.head-q.first == queueChunk {
		clear(q.chunks[0]) // nothing of the old entries stays reachable
		q.spare = q.chunks[0]
		q.chunks[0] = nil
		q.chunks = q.chunks[1:]
		q.first += queueChunk
	}
}

// byteChunks keeps records in chunks of recordChunk bytes (a longer record
// has a chunk of its own), numbered from 0; the chunks before a given one
// are freed.
type byteChunks struct {
	chunks [][]byte // chunks[0] is number first
	first  int64
	spare  []byte
}

const recordChunk = 64 << 10

// add copies rec into the last chunk (or a new one) and returns where.
func (b *byteChunks) add(rec []byte) (chunk int64, off int32) {
	last := len(b.chunks) - 1
	if last < 0 || len(b.chunks[last])+len(rec) > cap(b.chunks[last]) {
		c := b.spare
		if c == nil || cap(c) < len(rec) {
			c = make([]byte, 0, max(recordChunk, len(rec)))
		}
		b.spare = nil
		b.chunks = append(b.chunks, c[:0])
		last++
	}
	off = int32(len(b.chunks[last]))
	b.chunks[last] = append(b.chunks[last], rec...)
	return b.first + int64(last), off
}

func (b *byteChunks) get(chunk int64, off int32, n int32) []byte {
	return b.chunks[chunk-b.first][off : off+n]
}

// freeBefore frees the chunks numbered below chunk.
func (b *byteChunks) freeBefore(chunk int64) {
	for b.first < chunk && len(b.chunks) > 0 {
		if c := b.chunks[0]; cap(c) == recordChunk {
			b.spare = c
		}
		b.chunks[0] = nil
		b.chunks = b.chunks[1:]
		b.first++
	}
}

// indexCost is about what an index entry of a window costs: its key and
// value in a Go map (16 bytes and a control byte a slot), with the slack
// of its load factor and of its doubling (a map never shrinks).
const indexCost = 40

// eventWindow holds the upload's events in the order they were added
// (time order) and finds them by identity hash, each as its window record
// (appendWindowRecord: its text fields and instant, what sameContent
// compares) and some 50 bytes of numbers, rather than a schema.Event and
// its strings. A conflict names the fields in which two of the upload's
// events differ, so the records are kept.
type eventWindow struct {
	q     chunkQueue[windowEntry]
	recs  byteChunks
	idx   map[uint64]int64 // identity hash -> the newest event's sequence number
	bytes int64            // the records' bytes in the window
}

type windowEntry struct {
	at    int64
	hash  uint64
	prev  int64 // the next older event with the same hash (sequence number), or -1
	chunk int64 // where the record is (byteChunks)
	off   int32
	n     int32 // the record's length
	line  int64
}

const windowEntryCost = 48

// windowHit is an event found in a window: its record (valid until the
// window changes) and source line.
type windowHit struct {
	rec  []byte
	line int64
}

func newEventWindow() *eventWindow { return &eventWindow{idx: map[uint64]int64{}} }

// add adds e, whose identity hash is hash and window record rec.
func (w *eventWindow) add(hash uint64, e *schema.Event, rec []byte) {
	prev, ok := w.idx[hash]
	if !ok {
		prev = -1
	}
	chunk, off := w.recs.add(rec)
	w.idx[hash] = w.q.push(windowEntry{at: e.OccurredAt.UnixMicro(), hash: hash, prev: prev, chunk: chunk, off: off,
		n: int32(len(rec)), line: e.Line})
	w.bytes += int64(len(rec))
}

// find returns the oldest event of the window that is e under id; rec is
// e's window record.
func (w *eventWindow) find(hash uint64, id Identity, e *schema.Event, rec []byte) (windowHit, bool) {
	var hit windowHit
	found := false
	seq, ok := w.idx[hash]
	for ok && seq >= w.q.head { // older ones have left the window
		x := w.q.at(seq)
		r := w.recs.get(x.chunk, x.off, x.n)
		if sameIdentityRecord(id, r, e, rec) {
			hit, found = windowHit{rec: r, line: x.line}, true
		}
		seq, ok = x.prev, x.prev >= 0
	}
	return hit, found
}

// evict drops the events before lo.
func (w *eventWindow) evict(lo int64) {
	for x := w.q.front(); x != nil && x.at < lo; x = w.q.front() {
		if w.idx[x.hash] == w.q.head {
			delete(w.idx, x.hash) // no newer event has its hash
		}
		w.bytes -= int64(x.n)
		w.q.pop()
	}
	if x := w.q.front(); x != nil {
		w.recs.freeBefore(x.chunk)
	} else {
		w.recs.freeBefore(w.recs.first + int64(len(w.recs.chunks)) - 1) // keep the last, still being filled
	}
}

// oldest returns the instant of the oldest event in the window.
func (w *eventWindow) oldest() (int64, bool) {
	if x := w.q.front(); x != nil {
		return x.at, true
	}
	return 0, false
}

// cost is about the memory the window's events take.
func (w *eventWindow) cost() int64 {
	return w.bytes + int64(w.q.len())*(windowEntryCost+indexCost)
}

// heldWindow holds held events in the order they were added (time order)
// and finds them by identity, each as 64 bytes of numbers and no record:
// its instant, its identity's hash under two seeds (the first is the
// index's key), its window record's hash under two more (the content),
// and the file and row it is stored at. Two events are taken as one
// identity when both identity hashes are equal, and as one content when
// both content hashes are: a wrong answer needs two 128-bit keyed hashes
// to collide. A held event re-sent over 24 h either way of a busy day
// (stable event ids) would otherwise cost its record, about 130 bytes for
// the contact line. A refusal names the fields of a changed event; the
// few it names are read again from their file (heldSource.event).
type heldWindow struct {
	q   chunkQueue[heldEntry]
	idx map[uint64]int64
}

type heldEntry struct {
	at    int64
	hash  uint64    // the identity's hash, the index's key
	check uint64    // the identity's hash under the filter's check seed
	sum   [2]uint64 // the window record's hashes (heldFilter.contentSum)
	prev  int64     // the next older event with the same hash (sequence number), or -1
	row   int64     // the event's row in its file
	file  int32     // index in the held version's files
}

const heldEntryCost = 64

func newHeldWindow() *heldWindow { return &heldWindow{idx: map[uint64]int64{}} }

func (w *heldWindow) add(x heldEntry) {
	prev, ok := w.idx[x.hash]
	if !ok {
		prev = -1
	}
	x.prev = prev
	w.idx[x.hash] = w.q.push(x)
}

// find returns the oldest event of the window whose identity hashes are
// hash and check.
func (w *heldWindow) find(hash, check uint64) (heldEntry, bool) {
	var hit heldEntry
	found := false
	seq, ok := w.idx[hash]
	for ok && seq >= w.q.head { // older ones have left the window
		x := w.q.at(seq)
		if x.check == check {
			hit, found = *x, true
		}
		seq, ok = x.prev, x.prev >= 0
	}
	return hit, found
}

// evict drops the events before lo.
func (w *heldWindow) evict(lo int64) {
	for x := w.q.front(); x != nil && x.at < lo; x = w.q.front() {
		if w.idx[x.hash] == w.q.head {
			delete(w.idx, x.hash) // no newer event has its hash
		}
		w.q.pop()
	}
}

// oldest returns the instant of the oldest event in the window.
func (w *heldWindow) oldest() (int64, bool) {
	if x := w.q.front(); x != nil {
		return x.at, true
	}
	return 0, false
}

// cost is about the memory the window's events take.
func (w *heldWindow) cost() int64 { return int64(w.q.len()) * (heldEntryCost + indexCost) }
