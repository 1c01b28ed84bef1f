// Package tally counts strings exactly with bounded memory, spilling
// sorted runs to temporary files.
package tally

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"strings"

	"github.com/flowcat-catalog/flowcat/catalog/internal/kway"
)

// spillBuf is the read and write buffer of one run.
const spillBuf = 32 << 10

// maxFanIn bounds the runs merged at once (open files and read buffers).
const maxFanIn = 64

// Counter counts occurrences of strings exactly with bounded memory: it
// holds a map of up to max bytes of keys, spills it as a sorted run of
// (key, count) to a temporary file when full, and yields the keys in
// order with their summed counts by merging the runs. A run's file is
// closed once written and opened again only to merge (at most maxFanIn
// at once), so many counters may spill side by side. Callers give it
// pseudonyms or generalized values, never raw identifiers: its runs are
// files.
type Counter struct {
	dir   string
	max   int
	m     map[string]uint64
	bytes int
	runs  []string // paths of the spilled runs
}

// New returns a counter that spills to dir past max bytes of keys.
func New(dir string, max int) *Counter {
	if max < 4<<10 {
		max = 4 << 10
	}
	return &Counter{dir: dir, max: max, m: map[string]uint64{}}
}

// Add counts key n more times.
func (c *Counter) Add(key string, n uint64) error {
	if v, ok := c.m[key]; ok {
		c.m[key] = v + n
		return nil
	}
	if c.bytes >= c.max {
		if err := c.spill(); err != nil {
			return err
		}
	}
	c.m[strings.Clone(key)] = n
	c.bytes += len(key) + 48 // with the map's own cost, roughly
	return nil
}

// Distinct returns the number of distinct keys added.
func (c *Counter) Distinct() (uint64, error) {
	if len(c.runs) == 0 {
		return uint64(len(c.m)), nil
	}
	var n uint64
	err := c.Each(func(string, uint64) error { n++; return nil })
	return n, err
}

// Runs is the number of runs spilled so far (for tests of the bound).
func (c *Counter) Runs() int { return len(c.runs) }

func (c *Counter) spill() error {
	f, err := os.CreateTemp(c.dir, "classes-*")
	if err != nil {
		return fmt.Errorf("tally: %w", err)
	}
	c.runs = append(c.runs, f.Name())
	defer f.Close()
	w := bufio.NewWriterSize(f, spillBuf)
	keys := make([]string, 0, len(c.m))
	for k := range c.m {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	var b []byte
	for _, k := range keys {
		b = appendEntry(b[:0], k, c.m[k])
		if _, err := w.Write(b); err != nil {
			return fmt.Errorf("tally: %w", err)
		}
	}
	if err := w.Flush(); err != nil {
		return fmt.Errorf("tally: %w", err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("tally: %w", err)
	}
	clear(c.m)
	c.bytes = 0
	return nil
}

func appendEntry(b []byte, k string, n uint64) []byte {
	b = binary.AppendUvarint(b, uint64(len(k)))
	b = append(b, k...)
	return binary.AppendUvarint(b, n)
}

// Each calls fn for every distinct key in byte order with its count. It
// may be called more than once; Add must not be called after it.
func (c *Counter) Each(fn func(key string, n uint64) error) error {
	if len(c.runs) == 0 {
		keys := make([]string, 0, len(c.m))
		for k := range c.m {
			keys = append(keys, k)
		}
		slices.Sort(keys)
		for _, k := range keys {
			if err := fn(k, c.m[k]); err != nil {
				return err
			}
		}
		return nil
	}
	if len(c.m) > 0 {
		if err := c.spill(); err != nil {
			return err
		}
	}
	for len(c.runs) > maxFanIn {
		f, err := os.CreateTemp(c.dir, "classes-*")
		if err != nil {
			return fmt.Errorf("tally: %w", err)
		}
		w := bufio.NewWriterSize(f, spillBuf)
		var b []byte
		err = merge(c.runs[:maxFanIn], func(k string, n uint64) error {
			b = appendEntry(b[:0], k, n)
			_, err := w.Write(b)
			return err
		})
		if err == nil {
			err = w.Flush()
		}
		if cerr := f.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			os.Remove(f.Name())
			return fmt.Errorf("tally: %w", err)
		}
		for _, g := range c.runs[:maxFanIn] {
			os.Remove(g)
		}
		c.runs = append(slices.Delete(c.runs, 0, maxFanIn), f.Name())
	}
	if err := merge(c.runs, fn); err != nil {
		return fmt.Errorf("tally: %w", err)
	}
	return nil
}

// Close deletes the runs.
func (c *Counter) Close() error {
	var errs []error
	for _, f := range c.runs {
		if err := os.Remove(f); err != nil && !errors.Is(err, os.ErrNotExist) {
			errs = append(errs, err)
		}
	}
	c.runs, c.m = nil, nil
	return errors.Join(errs...)
}

type run struct {
	r   *bufio.Reader
	key string
	n   uint64
}

func (r *run) next() (bool, error) {
	l, err := binary.ReadUvarint(r.r)
	if err == io.EOF {
		return false, nil
	}
	if err != nil {
		return false, err
	}
	b := make([]byte, l)
	if _, err := io.ReadFull(r.r, b); err != nil {
		return false, err
	}
	r.key = string(b)
	if r.n, err = binary.ReadUvarint(r.r); err != nil {
		return false, err
	}
	return true, nil
}

// merge merges sorted runs of (key, count), calling fn once per distinct
// key in order with the summed count.
func merge(runs []string, fn func(string, uint64) error) error {
	rs := make([]*run, 0, len(runs))
	for _, name := range runs {
		f, err := os.Open(name)
		if err != nil {
			return err
		}
		defer f.Close()
		r := &run{r: bufio.NewReaderSize(f, spillBuf)}
		ok, err := r.next()
		if err != nil {
			return err
		}
		if ok {
			rs = append(rs, r)
		}
	}
	h := kway.New(func(a, b *run) bool { return a.key < b.key }, rs...)
	var cur string
	var sum uint64
	have := false
	for h.Len() > 0 {
		r := h.Top()
		if have && r.key != cur {
			if err := fn(cur, sum); err != nil {
				return err
			}
			sum = 0
		}
		cur, have = r.key, true
		sum += r.n
		if err := h.Advance((*run).next); err != nil {
			return err
		}
	}
	if have {
		return fn(cur, sum)
	}
	return nil
}
