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

// slot is what each window entry starts with: its instant, its identity
// hash, and the next older entry with that hash.
type slot struct {
	at   int64
	hash uint64
	prev int64 // sequence number, or -1
}

func (s *slot) base() *slot { return s }

// timeIndex is a window's queue of entries in time order with an index of
// the newest entry of each identity hash; the entries of one hash are
// chained newest to oldest.
type timeIndex[T any, PT interface {
	*T
	base() *slot
}] struct {
	q   chunkQueue[T]
	idx map[uint64]int64
}

func (w *timeIndex[T, PT]) push(x T) {
	s := PT(&x).base()
	prev, ok := w.idx[s.hash]
	if !ok {
		prev = -1
	}
	s.prev = prev
	w.idx[s.hash] = w.q.push(x)
}

// each calls fn for the entries in the window with hash, newest first.
func (w *timeIndex[T, PT]) each(hash uint64, fn func(*T)) {
	seq, ok := w.idx[hash]
	for ok && seq >= w.q.head { // older ones have left the window
		x := w.q.at(seq)
		fn(x)
		p := PT(x).base().prev
		seq, ok = p, p >= 0
	}
}

// evict drops the entries before lo, calling drop (when not nil) for each.
func (w *timeIndex[T, PT]) evict(lo int64, drop func(*T)) {
	for x := w.q.front(); x != nil && PT(x).base().at < lo; x = w.q.front() {
		if s := PT(x).base(); w.idx[s.hash] == w.q.head {
			delete(w.idx, s.hash) // no newer entry has its hash
		}
		if drop != nil {
			drop(x)
		}
		w.q.pop()
	}
}

// oldest returns the instant of the oldest entry in the window.
func (w *timeIndex[T, PT]) oldest() (int64, bool) {
	if x := w.q.front(); x != nil {
		return PT(x).base().at, true
	}
	return 0, false
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
	ti    timeIndex[windowEntry, *windowEntry]
	recs  byteChunks
	bytes int64 // the records' bytes in the window
}

type windowEntry struct {
	slot
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

func newEventWindow() *eventWindow {
	return &eventWindow{ti: timeIndex[windowEntry, *windowEntry]{idx: map[uint64]int64{}}}
}

// add adds e, whose identity hash is hash and window record rec.
func (w *eventWindow) add(hash uint64, e *schema.Event, rec []byte) {
	chunk, off := w.recs.add(rec)
	w.ti.push(windowEntry{slot: slot{at: e.OccurredAt.UnixMicro(), hash: hash}, chunk: chunk, off: off,
		n: int32(len(rec)), line: e.Line})
	w.bytes += int64(len(rec))
}

// find returns the oldest event of the window that is e under id; rec is
// e's window record.
func (w *eventWindow) find(hash uint64, id Identity, e *schema.Event, rec []byte) (windowHit, bool) {
	var hit windowHit
	found := false
	w.ti.each(hash, func(x *windowEntry) {
		if r := w.recs.get(x.chunk, x.off, x.n); sameIdentityRecord(id, r, e, rec) {
			hit, found = windowHit{rec: r, line: x.line}, true
		}
	})
	return hit, found
}

// evict drops the events before lo.
func (w *eventWindow) evict(lo int64) {
	w.ti.evict(lo, func(x *windowEntry) { w.bytes -= int64(x.n) })
	if x := w.ti.q.front(); x != nil {
		w.recs.freeBefore(x.chunk)
	} else {
		w.recs.freeBefore(w.recs.first + int64(len(w.recs.chunks)) - 1) // keep the last, still being filled
	}
}

// cost is about the memory the window's events take.
func (w *eventWindow) cost() int64 {
	return w.bytes + int64(w.ti.q.len())*(windowEntryCost+indexCost)
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
	ti timeIndex[heldEntry, *heldEntry]
}

type heldEntry struct {
	slot            // hash: the identity's hash, the index's key
	check uint64    // the identity's hash under the filter's check seed
	sum   [2]uint64 // the window record's hashes (heldFilter.contentSum)
	row   int64     // the event's row in its file
	file  int32     // index in the held version's files
}

const heldEntryCost = 64

func newHeldWindow() *heldWindow {
	return &heldWindow{ti: timeIndex[heldEntry, *heldEntry]{idx: map[uint64]int64{}}}
}

// find returns the oldest event of the window whose identity hashes are
// hash and check.
func (w *heldWindow) find(hash, check uint64) (heldEntry, bool) {
	var hit heldEntry
	found := false
	w.ti.each(hash, func(x *heldEntry) {
		if x.check == check {
			hit, found = *x, true
		}
	})
	return hit, found
}

func (w *heldWindow) add(x heldEntry)        { w.ti.push(x) }
func (w *heldWindow) evict(lo int64)         { w.ti.evict(lo, nil) }
func (w *heldWindow) oldest() (int64, bool)  { return w.ti.oldest() }
func (w *eventWindow) oldest() (int64, bool) { return w.ti.oldest() }

// cost is about the memory the window's events take.
func (w *heldWindow) cost() int64 { return int64(w.ti.q.len()) * (heldEntryCost + indexCost) }
