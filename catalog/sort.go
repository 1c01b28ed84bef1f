package catalog

import (
	"bufio"
	"bytes"
	"cmp"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/internal/kway"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// sorter orders the events of one upload by (occurred_at, closing events
// first, source line)
// with bounded memory: it keeps up to max events, and when one more comes
// it sorts them and spills them as a run to a temporary file. Finish
// merges the runs, at most fanIn at once: when there are more, it first
// merges the oldest few into one new run, as few as leave fanIn (at most
// fanIn at a time), so that as few events as can be go through a pass
// more (the first merge of an external sort takes only the runs it must:
// Knuth, TAOCP vol. 3, 5.4.9, from memory).
// Events reach it already pseudonymized, so its temporary files hold no
// raw identifier; they are deleted by Close.
//
// Memory: max events, and at most maxRunBytes of their records, in the
// buffer while reading (two buffers while one is spilled); while merging,
// the buffers are released and one read buffer of runBufSize is held per
// run merged (at most fanIn), whatever the size of the upload.
type sorter struct {
	// byCase orders by case instead (cases.Less), for the per-case pass.
	byCase  bool
	dir     string
	max     int
	fanIn   int
	buf     *runBuf
	spare   *runBuf    // the other buffer, while one is spilled
	work    spillWork  // used by one spill at a time
	pending chan error // the spill in the background, if any
	runs    []*os.File
	enc     []byte
	inter   map[string]string
	rw      *runWriter // the writer of every run, reset for each (runWriter)
	// spilled is the largest buffer spilled so far (records' bytes,
	// events): the size a new buffer starts at.
	spilled struct{ bytes, events int }
	// remerged counts the events written again by merges before the
	// last one.
	remerged int
	// inputs are runs sorted already (a version's case groups), merged
	// with the sorter's own by Finish.
	inputs []io.Reader
}

const (
	runBufSize = 32 << 10
	// maxFanIn bounds the runs merged at once, and so the open files and
	// read buffers of a merge (128 x 32 KiB = 4 MiB).
	maxFanIn = 128
	// maxRunBytes bounds the bytes of the records held in a buffer, so
	// wide rows (long free text in a mapped column) spill sooner.
	maxRunBytes = 32 << 20
	// internMaxLen is the longest value the merge interns.
	internMaxLen = 64
)

func newSorter(dir string, max int) *sorter {
	return &sorter{dir: dir, max: max, fanIn: maxFanIn, inter: make(map[string]string)}
}

// newCaseSorter returns a sorter that orders events by cases.Less: each
// case's events together, in time order, so that per-case work holds one
// case at a time.
func newCaseSorter(dir string, max int) *sorter {
	s := newSorter(dir, max)
	s.byCase = true
	return s
}

func (s *sorter) less(a, b *schema.Event) int {
	if s.byCase {
		return cases.Less(a, b)
	}
	return lessEvent(a, b)
}

// Add takes e. A full buffer is spilled only when one more event comes,
// so an upload of at most max events never touches the disk.
func (s *sorter) Add(e *schema.Event) error {
	if s.buf != nil && (s.buf.len() >= s.max || len(s.buf.recs) >= maxRunBytes) {
		if err := s.spill(); err != nil {
			return err
		}
	}
	if s.buf == nil {
		s.buf = s.newRunBuf()
	}
	if n := s.buf.len(); n == firstEvents && s.spilled.events == 0 && s.max > n {
		// A first buffer about to grow past its first events: make room
		// for a whole run at their size, once (growing bit by bit would
		// copy it several times over), within maxRunBytes.
		per := len(s.buf.recs)/n + 1
		events := min(s.max, maxRunBytes/per)
		s.buf.reserve(min(maxRunBytes, per*events*9/8), events)
	}
	s.buf.add(e, s.byCase)
	return nil
}

// firstEvents is the room a sorter's first buffer starts with, before
// it knows how long its records are.
const firstEvents = 4096

// newRunBuf returns an empty buffer the size of the largest spilled so
// far and an eighth, or, before any spill, of firstEvents events of 128
// bytes: a buffer grown from nothing to a run's size copies it several
// times over.
func (s *sorter) newRunBuf() *runBuf {
	nb, events := s.spilled.bytes+s.spilled.bytes/8, s.spilled.events
	if events == 0 {
		events = min(s.max, firstEvents)
		nb = events * 128
	}
	b := &runBuf{recs: make([]byte, 0, nb)}
	if s.byCase {
		b.caseKeys = make([]caseKey, 0, events)
	} else {
		b.keys = make([]sortKey, 0, events)
	}
	return b
}

// runBuf holds the events of one run before it is sorted: each event's
// record in the run format (encodeEvent), one after another in recs, and
// its sort key (keys, or caseKeys for a sorter by case), in arrival order.
// A record takes about a third of the bytes of a schema.Event and the
// strings it points to, and neither records nor keys hold a pointer, so
// the garbage collector has nothing in a buffer to scan. Its slices are
// kept from one run to the next. Offsets fit in 32 bits: a buffer spills
// once its records reach maxRunBytes.
type runBuf struct {
	recs     []byte
	keys     []sortKey
	caseKeys []caseKey
}

func (b *runBuf) len() int { return len(b.keys) + len(b.caseKeys) }

// reserve makes room for records of bytes in all and keys for events.
func (b *runBuf) reserve(bytes, events int) {
	b.recs = slices.Grow(b.recs, bytes-len(b.recs))
	if b.keys != nil {
		b.keys = slices.Grow(b.keys, events-len(b.keys))
	} else {
		b.caseKeys = slices.Grow(b.caseKeys, events-len(b.caseKeys))
	}
}

func (b *runBuf) reset() {
	b.recs, b.keys, b.caseKeys = b.recs[:0], b.keys[:0], b.caseKeys[:0]
}

// add appends e's record and its key.
func (b *runBuf) add(e *schema.Event, byCase bool) {
	off := len(b.recs)
	b.recs = encodeEvent(b.recs, e)
	t := e.OccurredAt
	if !byCase {
		b.keys = append(b.keys, sortKey{sec: t.Unix(), nsec: int32(t.Nanosecond()), rank: closingFirst(e.Type), line: e.Line, off: uint32(off)})
		return
	}
	// The case id's bytes in the record: after the record's length and
	// the site.
	_, h := binary.Uvarint(b.recs[off:])
	p := off + h
	_, k := binary.Uvarint(b.recs[p:])
	p += k + len(e.Site)
	_, k = binary.Uvarint(b.recs[p:])
	p += k
	b.caseKeys = append(b.caseKeys, caseKey{pre: prefix8(e.CaseID), idOff: uint32(p), idLen: uint32(len(e.CaseID)),
		sec: t.Unix(), nsec: int32(t.Nanosecond()), rank: int8(e.Type.Rank()), off: uint32(off)})
}

// record returns the record at off, its length included.
func (b *runBuf) record(off uint32) []byte {
	n, h := binary.Uvarint(b.recs[off:])
	return b.recs[off : int(off)+h+int(n)]
}

// body returns the record at off without its length, as run.decode takes it.
func (b *runBuf) body(off uint32) []byte {
	n, h := binary.Uvarint(b.recs[off:])
	return b.recs[int(off)+h : int(off)+h+int(n)]
}

func lessEvent(a, b *schema.Event) int {
	if c := a.OccurredAt.Compare(b.OccurredAt); c != 0 {
		return c
	}
	if c := closingFirst(a.Type) - closingFirst(b.Type); c != 0 {
		return int(c)
	}
	switch {
	case a.Line < b.Line:
		return -1
	case a.Line > b.Line:
		return 1
	}
	return 0
}

// closingFirst ranks the events that end something (a complete, an
// abandon, a departure) before the others at one instant, so a resource
// freed at an instant is free for a start at that instant.
func closingFirst(t schema.EventType) int8 {
	switch t {
	case schema.Complete, schema.Abandon, schema.Departure:
		return 0
	}
	return 1
}

// caseKey is what a sorter by case sorts its buffer by.
type caseKey struct {
	pre          uint64 // the id's first 8 bytes, big-endian, zero-padded: most comparisons end here
	sec          int64
	idOff, idLen uint32 // the case id's bytes in the buffer's records
	nsec         int32
	off          uint32 // the record's offset: arrival order
	rank         int8
}

// sortKey is what the buffer is sorted by: sorting small keys rather than
// records saves most of the moving.
type sortKey struct {
	sec  int64
	line int64
	nsec int32
	off  uint32 // the record's offset: arrival order
	rank int8   // closingFirst
}

func cmpKey(a, b sortKey) int {
	switch {
	case a.sec != b.sec:
		return cmp.Compare(a.sec, b.sec)
	case a.nsec != b.nsec:
		return cmp.Compare(a.nsec, b.nsec)
	case a.rank != b.rank:
		return int(a.rank) - int(b.rank)
	case a.line != b.line:
		return cmp.Compare(a.line, b.line)
	}
	return cmp.Compare(a.off, b.off)
}

// prefix8 is s's first 8 bytes as a big-endian number, zero-padded: two
// strings' prefixes compare as the strings do, or tie.
func prefix8(s string) uint64 {
	var b [8]byte
	copy(b[:], s)
	return binary.BigEndian.Uint64(b[:])
}

// spillWork is the scratch space of one sort of a buffer.
type spillWork struct {
	offs []uint32
	// a and b decode two records whose keys tie, for cases.Less; err is
	// the first record that did not decode.
	a, b run
	err  error
}

// order returns the offsets of b's records in the sorter's order.
func (s *sorter) order(b *runBuf, w *spillWork) ([]uint32, error) {
	w.offs, w.err = w.offs[:0], nil
	if s.byCase {
		// Keys hold what cases.Less compares first, so most comparisons
		// read no record; full ties decode both and fall back to
		// cases.Less.
		slices.SortFunc(b.caseKeys, func(x, y caseKey) int {
			if x.pre != y.pre {
				return cmp.Compare(x.pre, y.pre)
			}
			if c := bytes.Compare(b.recs[x.idOff:x.idOff+x.idLen], b.recs[y.idOff:y.idOff+y.idLen]); c != 0 {
				return c
			}
			if x.sec != y.sec {
				return cmp.Compare(x.sec, y.sec)
			}
			if x.nsec != y.nsec {
				return cmp.Compare(x.nsec, y.nsec)
			}
			if x.rank != y.rank {
				return int(x.rank) - int(y.rank)
			}
			if c := w.tie(b.body(x.off), b.body(y.off)); c != 0 {
				return c
			}
			return cmp.Compare(x.off, y.off)
		})
		for _, k := range b.caseKeys {
			w.offs = append(w.offs, k.off)
		}
		return w.offs, w.err
	}
	slices.SortFunc(b.keys, cmpKey)
	for _, k := range b.keys {
		w.offs = append(w.offs, k.off)
	}
	return w.offs, nil
}

// tie orders two records by cases.Less.
func (w *spillWork) tie(x, y []byte) int {
	if w.a.inter == nil {
		w.a.inter, w.b.inter = make(map[string]string), make(map[string]string)
	}
	err := w.a.decode(x)
	if err == nil {
		err = w.b.decode(y)
	}
	if err != nil {
		w.err = cmp.Or(w.err, err)
		return 0
	}
	return cases.Less(&w.a.ev, &w.b.ev)
}

func (s *sorter) newRun() (*os.File, error) {
	f, err := os.CreateTemp(s.dir, "run-*")
	if err != nil {
		return nil, fmt.Errorf("sort: %w", err)
	}
	s.runs = append(s.runs, f) // Close deletes it from here on
	return f, nil
}

// spill hands the full buffer to a goroutine that sorts it and writes it
// as a run, and goes on with the other buffer: reading and sorting overlap
// on two cores. One spill runs at a time, so at most two buffers exist.
func (s *sorter) spill() error {
	if err := s.wait(); err != nil {
		return err
	}
	f, err := s.newRun()
	if err != nil {
		return err
	}
	buf := s.buf
	s.spilled.bytes = max(s.spilled.bytes, len(buf.recs))
	s.spilled.events = max(s.spilled.events, buf.len())
	s.buf, s.spare = s.spare, nil
	done := make(chan error, 1)
	s.pending = done
	go func() {
		err := s.writeRun(f, buf, &s.work)
		buf.reset()
		s.spare = buf
		done <- err
	}()
	return nil
}

// wait waits for the spill in the background, if any.
func (s *sorter) wait() error {
	if s.pending == nil {
		return nil
	}
	err := <-s.pending
	s.pending = nil
	return err
}

// writeRun writes buf's records, sorted, to f.
func (s *sorter) writeRun(f *os.File, buf *runBuf, wk *spillWork) error {
	offs, err := s.order(buf, wk)
	if err != nil {
		return err
	}
	w := s.runWriter(f)
	for _, off := range offs {
		if _, err := w.Write(buf.record(off)); err != nil {
			w.Close() // its goroutines end
			return fmt.Errorf("sort: %w", err)
		}
	}
	if err := w.Close(); err != nil {
		return fmt.Errorf("sort: %w", err)
	}
	return nil
}

// runWriter returns the writer of the run framing over f: one writer,
// reset for each run, so that its block buffers are allocated once per
// sort rather than once per run. Runs are written one at a time (a spill
// waits for the one before it; merges of the oldest runs follow the last
// spill).
func (s *sorter) runWriter(f io.Writer) *runWriter {
	if s.rw == nil {
		s.rw = newRunWriter(f)
	} else {
		s.rw.Reset(f)
	}
	return s.rw
}

// addSorted adds r, a stream of events in the run format already in the
// sorter's order, to what Finish merges. The caller keeps r open until
// Finish returns; at most maxFanIn such inputs are taken.
func (s *sorter) addSorted(r io.Reader) { s.inputs = append(s.inputs, r) }

// Finish calls fn for every event in order. The event passed to fn is only
// valid during the call.
func (s *sorter) Finish(fn func(*schema.Event) error) error {
	if len(s.runs) == 0 && len(s.inputs) == 0 {
		if s.buf == nil {
			return nil
		}
		offs, err := s.order(s.buf, &s.work)
		if err != nil {
			return err
		}
		r := &run{inter: s.inter}
		for _, off := range offs {
			if err := r.decode(s.buf.body(off)); err != nil {
				return err
			}
			if err := fn(&r.ev); err != nil {
				return err
			}
		}
		return nil
	}
	if s.buf != nil && s.buf.len() > 0 {
		if err := s.spill(); err != nil {
			return err
		}
	}
	if err := s.wait(); err != nil {
		return err
	}
	s.buf, s.spare, s.work = nil, nil, spillWork{} // the merge needs none of it
	for len(s.runs) > s.fanIn {
		if err := s.mergeOldest(min(s.fanIn, len(s.runs)-s.fanIn+1)); err != nil {
			return err
		}
	}
	srcs := make([]io.Reader, 0, len(s.runs)+len(s.inputs))
	for _, f := range s.runs {
		if _, err := f.Seek(0, io.SeekStart); err != nil {
			return fmt.Errorf("sort: %w", err)
		}
		srcs = append(srcs, f)
	}
	return s.mergeAhead(append(srcs, s.inputs...), fn)
}

// errMergeStopped ends a merge whose consumer stopped.
var errMergeStopped = errors.New("sort: merge stopped")

// mergeAhead is merge with the reading, decoding and ordering of runs on
// another goroutine, handed over in batches of events, so that it overlaps
// with fn's work on two cores. It holds sixteen batches of mergeBatch
// events: deep enough that neither side waits on the other's bursts (see
// batches).
func (s *sorter) mergeAhead(runs []io.Reader, fn func(*schema.Event) error) error {
	const mergeBatch, batches = 512, 16
	full := make(chan []schema.Event, batches-1)
	free := make(chan []schema.Event, batches)
	for range batches {
		free <- written(make([]schema.Event, 0, mergeBatch))
	}
	stop := make(chan struct{})
	perr := make(chan error, 1)
	go func() {
		b := <-free
		send := func() error {
			select {
			case full <- b:
			case <-stop:
				return errMergeStopped
			}
			select {
			case b = <-free:
				return nil
			case <-stop:
				return errMergeStopped
			}
		}
		err := s.mergeReaders(runs, func(e *schema.Event) error {
			b = append(b, *e)
			if len(b) == cap(b) {
				return send()
			}
			return nil
		})
		if err == nil && len(b) > 0 {
			select {
			case full <- b:
			case <-stop:
			}
		}
		close(full)
		perr <- err
	}()
	var ferr error
	for b := range full {
		for i := range b {
			if ferr != nil {
				break
			}
			if err := fn(&b[i]); err != nil {
				ferr = err
				close(stop)
			}
		}
		clear(b)
		free <- b[:0]
	}
	if err := <-perr; ferr == nil && err != nil && err != errMergeStopped {
		return err
	}
	return ferr
}

// mergeOldest merges the first k runs into a new last run.
func (s *sorter) mergeOldest(k int) error {
	f, err := s.newRun()
	if err != nil {
		return err
	}
	w := s.runWriter(f)
	err = s.merge(s.runs[:k], func(e *schema.Event) error {
		s.remerged++
		s.enc = encodeEvent(s.enc[:0], e)
		if _, err := w.Write(s.enc); err != nil {
			return fmt.Errorf("sort: %w", err)
		}
		return nil
	})
	if cerr := w.Close(); err == nil && cerr != nil {
		err = fmt.Errorf("sort: %w", cerr)
	}
	if err != nil {
		return err
	}
	for _, g := range s.runs[:k] {
		g.Close()
		if err := os.Remove(g.Name()); err != nil {
			return fmt.Errorf("sort: %w", err) // Close retries them all
		}
	}
	s.runs = slices.Delete(s.runs, 0, k)
	return nil
}

// merge calls fn for the events of runs in order.
func (s *sorter) merge(runs []*os.File, fn func(*schema.Event) error) error {
	rs := make([]io.Reader, len(runs))
	for i, f := range runs {
		if _, err := f.Seek(0, io.SeekStart); err != nil {
			return fmt.Errorf("sort: %w", err)
		}
		rs[i] = f
	}
	return s.mergeReaders(rs, fn)
}

// mergeReaders calls fn for the events of sorted runs in order.
func (s *sorter) mergeReaders(runs []io.Reader, fn func(*schema.Event) error) error {
	rs := make([]*run, 0, len(runs))
	for _, f := range runs {
		r := &run{r: newRunReader(f), inter: s.inter, less: s.less}
		ok, err := r.next()
		if err != nil {
			return err
		}
		if ok {
			rs = append(rs, r)
		}
	}
	h := kway.New(func(a, b *run) bool { return a.less(&a.ev, &b.ev) < 0 }, rs...)
	for h.Len() > 0 {
		if err := fn(&h.Top().ev); err != nil {
			return err
		}
		if err := h.Advance((*run).next); err != nil {
			return err
		}
	}
	return nil
}

// Close deletes the runs.
func (s *sorter) Close() error {
	var errs []error
	if s.pending != nil {
		<-s.pending // its error is moot: the runs go
		s.pending = nil
	}
	for _, f := range s.runs {
		f.Close()
		if err := os.Remove(f.Name()); err != nil && !errors.Is(err, os.ErrNotExist) {
			errs = append(errs, err)
		}
	}
	s.runs = nil
	s.buf, s.spare = nil, nil
	return errors.Join(errs...)
}

type run struct {
	// lastCase and lastSubj are the previous event's: in a run sorted by
	// case the next event mostly names them again, and reuses the string.
	lastCase, lastSubj string
	// last holds the previous event's interned fields, so a repeated
	// value costs a compare, not a map lookup.
	last  [8]string
	less  func(a, b *schema.Event) int
	r     *bufio.Reader
	ev    schema.Event
	inter map[string]string
	tmp   []byte
}

// The run format: per event, its record's length as a uvarint, then the
// record: the thirteen fields in schema order, strings as uvarint length +
// bytes, occurred_at as varint Unix microseconds, the source line and
// Event.Row as uvarints, then the event attribute values (Event.Attrs) as one string
// (empty for an event without). Runs are temporary: the format is read
// only by the process that wrote it. Every stream of it is framed by
// newRunWriter and read by newRunReader (runframe.go).

func encodeEvent(b []byte, e *schema.Event) []byte {
	// The record's length goes first; a record of under 128 bytes (most)
	// takes one byte for it, a longer one is moved up to make room.
	at := len(b)
	b = append(b, 0)
	str := func(s string) {
		b = binary.AppendUvarint(b, uint64(len(s)))
		b = append(b, s...)
	}
	str(e.Site)
	str(e.CaseID)
	str(e.SubjectID)
	str(e.ResourceID)
	str(string(e.Type))
	str(e.Activity)
	str(e.Queue)
	b = binary.AppendVarint(b, e.OccurredAt.UnixMicro())
	str(e.Priority)
	str(e.Channel)
	str(e.Outcome)
	str(e.EventID)
	str(e.InstanceID)
	b = binary.AppendUvarint(b, uint64(e.Line))
	b = binary.AppendUvarint(b, uint64(e.Row))
	str(e.Attrs)
	n := len(b) - at - 1
	if n < 0x80 {
		b[at] = byte(n)
		return b
	}
	var hdr [binary.MaxVarintLen64]byte
	h := binary.PutUvarint(hdr[:], uint64(n))
	b = append(b, hdr[:h-1]...)
	copy(b[at+h:], b[at+1:at+1+n])
	copy(b[at:], hdr[:h])
	return b
}

// errRunRecord is a record that does not decode: a run cut short or
// damaged.
var errRunRecord = errors.New("a damaged record")

// record is a cursor over one record of a run.
type record struct {
	b   []byte
	bad bool
}

func (c *record) uvarint() uint64 {
	v, n := binary.Uvarint(c.b)
	if n <= 0 {
		c.bad, c.b = true, nil
		return 0
	}
	c.b = c.b[n:]
	return v
}

// varint reads a zig-zag varint (binary.AppendVarint's form).
func (c *record) varint() int64 {
	u := c.uvarint()
	x := int64(u >> 1)
	if u&1 != 0 {
		x = ^x
	}
	return x
}

// bytes returns the next string's bytes, valid until the record's buffer
// is reused.
func (c *record) bytes() []byte {
	n := c.uvarint()
	if n > uint64(len(c.b)) {
		c.bad, c.b = true, nil
		return nil
	}
	v := c.b[:n]
	c.b = c.b[n:]
	return v
}

// next decodes the next event of the run; false at its end.
func (r *run) next() (bool, error) {
	n, err := binary.ReadUvarint(r.r)
	if err == io.EOF {
		return false, nil
	}
	if err != nil {
		return false, fmt.Errorf("sort: reading run: %w", err)
	}
	// The record from the reader's buffer where it fits (no copy), else
	// read whole into tmp.
	var b []byte
	peeked := n <= uint64(r.r.Size())
	if peeked {
		if b, err = r.r.Peek(int(n)); err != nil {
			return false, fmt.Errorf("sort: reading run: %w", noEOF(err))
		}
	} else {
		if cap(r.tmp) < int(n) {
			r.tmp = make([]byte, n)
		}
		b = r.tmp[:n]
		if _, err := io.ReadFull(r.r, b); err != nil {
			return false, fmt.Errorf("sort: reading run: %w", noEOF(err))
		}
	}
	err = r.decode(b)
	if peeked {
		r.r.Discard(int(n))
	}
	if err != nil {
		return false, err
	}
	return true, nil
}

// decode decodes b, one record without its length, into r.ev.
func (r *run) decode(b []byte) error {
	c := record{b: b}
	// str interns the values of the fields that repeat: the previous
	// event's value of the field first (in a run most consecutive events
	// share site, type, queue, activity), then the run's table.
	field := 0
	str := func() string {
		v := c.bytes()
		idx := field
		field++
		if len(v) == 0 {
			return ""
		}
		if last := &r.last[idx]; string(v) == *last {
			return *last
		}
		if s, ok := r.inter[string(v)]; ok {
			r.last[idx] = s
			return s
		}
		s := string(v)
		if len(r.inter) < 1<<14 && len(v) <= internMaxLen {
			r.inter[s] = s
		}
		r.last[idx] = s
		return s
	}
	// same reads a string that mostly repeats the previous event's (a
	// case id in a run sorted by case): equal bytes reuse it.
	same := func(last *string) string {
		v := c.bytes()
		if len(v) == 0 {
			return ""
		}
		if string(v) != *last {
			*last = string(v)
		}
		return *last
	}
	plain := func() string {
		v := c.bytes()
		if len(v) == 0 {
			return ""
		}
		return string(v)
	}
	e := &r.ev
	e.Site = str()
	e.CaseID = same(&r.lastCase)
	e.SubjectID = same(&r.lastSubj)
	e.ResourceID = str()
	e.Type = schema.EventType(str())
	e.Activity = str()
	e.Queue = str()
	e.OccurredAt = time.UnixMicro(c.varint()).UTC()
	e.Priority = str()
	e.Channel = str()
	e.Outcome = str()
	e.EventID = plain()
	e.InstanceID = plain()
	e.Line = int64(c.uvarint())
	e.Row = int64(c.uvarint())
	e.Attrs = plain()
	if c.bad || len(c.b) != 0 {
		return fmt.Errorf("sort: reading run: %w", errRunRecord)
	}
	return nil
}

// noEOF turns the end of a run in the middle of a record into
// io.ErrUnexpectedEOF.
func noEOF(err error) error {
	if err == io.EOF {
		return io.ErrUnexpectedEOF
	}
	return err
}
