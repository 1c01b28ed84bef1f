package catalog

import (
	"bufio"
	"container/heap"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// sorter orders the events of one upload by (occurred_at, source line)
// with bounded memory: it keeps up to max events, and when that many have
// come it sorts them and spills them as a run to a temporary file. Finish
// merges the runs. Events reach it already pseudonymized, so its temporary
// files hold no raw identifier; they are deleted by Close.
//
// Memory: max events in the buffer, plus one read buffer of runBufSize per
// run while merging.
type sorter struct {
	dir   string
	max   int
	buf   []schema.Event
	runs  []*os.File
	enc   []byte
	inter map[string]string
}

const runBufSize = 32 << 10

func newSorter(dir string, max int) *sorter {
	return &sorter{dir: dir, max: max, inter: make(map[string]string)}
}

// Add takes e.
func (s *sorter) Add(e *schema.Event) error {
	s.buf = append(s.buf, *e)
	if len(s.buf) >= s.max {
		return s.spill()
	}
	return nil
}

func lessEvent(a, b *schema.Event) int {
	if c := a.OccurredAt.Compare(b.OccurredAt); c != 0 {
		return c
	}
	switch {
	case a.Line < b.Line:
		return -1
	case a.Line > b.Line:
		return 1
	}
	return 0
}

func (s *sorter) sortBuf() {
	slices.SortFunc(s.buf, func(a, b schema.Event) int { return lessEvent(&a, &b) })
}

func (s *sorter) spill() error {
	s.sortBuf()
	f, err := os.CreateTemp(s.dir, "run-*")
	if err != nil {
		return fmt.Errorf("sort: %w", err)
	}
	s.runs = append(s.runs, f)
	w := bufio.NewWriterSize(f, runBufSize)
	for i := range s.buf {
		s.enc = encodeEvent(s.enc[:0], &s.buf[i])
		if _, err := w.Write(s.enc); err != nil {
			return fmt.Errorf("sort: %w", err)
		}
	}
	if err := w.Flush(); err != nil {
		return fmt.Errorf("sort: %w", err)
	}
	clear(s.buf) // drop string references
	s.buf = s.buf[:0]
	return nil
}

// Finish calls fn for every event in order. The event passed to fn is only
// valid during the call.
func (s *sorter) Finish(fn func(*schema.Event) error) error {
	if len(s.runs) == 0 {
		s.sortBuf()
		for i := range s.buf {
			if err := fn(&s.buf[i]); err != nil {
				return err
			}
		}
		return nil
	}
	if len(s.buf) > 0 {
		if err := s.spill(); err != nil {
			return err
		}
	}
	h := make(runHeap, 0, len(s.runs))
	for _, f := range s.runs {
		if _, err := f.Seek(0, io.SeekStart); err != nil {
			return fmt.Errorf("sort: %w", err)
		}
		r := &run{r: bufio.NewReaderSize(f, runBufSize), inter: s.inter}
		ok, err := r.next()
		if err != nil {
			return err
		}
		if ok {
			h = append(h, r)
		}
	}
	heap.Init(&h)
	for len(h) > 0 {
		r := h[0]
		if err := fn(&r.ev); err != nil {
			return err
		}
		ok, err := r.next()
		if err != nil {
			return err
		}
		if ok {
			heap.Fix(&h, 0)
		} else {
			heap.Pop(&h)
		}
	}
	return nil
}

// Close deletes the runs.
func (s *sorter) Close() error {
	var errs []error
	for _, f := range s.runs {
		f.Close()
		if err := os.Remove(f.Name()); err != nil && !errors.Is(err, os.ErrNotExist) {
			errs = append(errs, err)
		}
	}
	s.runs = nil
	s.buf = nil
	return errors.Join(errs...)
}

type run struct {
	r     *bufio.Reader
	ev    schema.Event
	inter map[string]string
	tmp   []byte
}

type runHeap []*run

func (h runHeap) Len() int           { return len(h) }
func (h runHeap) Less(i, j int) bool { return lessEvent(&h[i].ev, &h[j].ev) < 0 }
func (h runHeap) Swap(i, j int)      { h[i], h[j] = h[j], h[i] }
func (h *runHeap) Push(x any)        { *h = append(*h, x.(*run)) }
func (h *runHeap) Pop() any {
	old := *h
	r := old[len(old)-1]
	*h = old[:len(old)-1]
	return r
}

// The run format: per event, the twelve fields in schema order, strings as
// uvarint length + bytes, occurred_at as varint Unix microseconds, then the
// source line as uvarint.

func encodeEvent(b []byte, e *schema.Event) []byte {
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
	return binary.AppendUvarint(b, uint64(e.Line))
}

// next decodes the next event of the run; false at its end.
func (r *run) next() (bool, error) {
	var err error
	str := func(intern bool) string {
		if err != nil {
			return ""
		}
		var n uint64
		n, err = binary.ReadUvarint(r.r)
		if err != nil {
			return ""
		}
		if n == 0 {
			return ""
		}
		if cap(r.tmp) < int(n) {
			r.tmp = make([]byte, n)
		}
		r.tmp = r.tmp[:n]
		if _, err = io.ReadFull(r.r, r.tmp); err != nil {
			return ""
		}
		if intern {
			if s, ok := r.inter[string(r.tmp)]; ok {
				return s
			}
			if len(r.inter) < 1<<14 {
				s := string(r.tmp)
				r.inter[s] = s
				return s
			}
		}
		return string(r.tmp)
	}
	if _, perr := r.r.Peek(1); perr == io.EOF {
		return false, nil
	}
	e := &r.ev
	e.Site = str(true)
	e.CaseID = str(false)
	e.SubjectID = str(false)
	e.ResourceID = str(true)
	e.Type = schema.EventType(str(true))
	e.Activity = str(true)
	e.Queue = str(true)
	if err == nil {
		var us int64
		us, err = binary.ReadVarint(r.r)
		e.OccurredAt = time.UnixMicro(us).UTC()
	}
	e.Priority = str(true)
	e.Channel = str(true)
	e.Outcome = str(true)
	e.EventID = str(false)
	if err == nil {
		var line uint64
		line, err = binary.ReadUvarint(r.r)
		e.Line = int64(line)
	}
	if err != nil {
		return false, fmt.Errorf("sort: reading run: %w", err)
	}
	return true, nil
}
