package export

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"time"

	"github.com/parquet-go/parquet-go"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/internal/kway"
	"github.com/flowcat-catalog/flowcat/schema"
)

// Opener opens a stored snapshot file; (*catalog.Store).Blobs().Open is one.
type Opener func(ctx context.Context, id blob.ID) (blob.Reader, error)

// Source is where a version's files are read from: Open opens a file,
// TempDir (default os.TempDir()) takes the temporary files of staged merges
// and diffs, which hold pseudonymized events; give the store's own temp
// dir so they stay with the data.
type Source struct {
	Open    Opener
	TempDir string
}

// MaxOpenFiles bounds the files a merge holds open (and buffers) at once;
// a version with more files is merged in stages through temporary files.
const MaxOpenFiles = 64

// maxOpen is MaxOpenFiles; tests lower it to exercise staged merges.
var maxOpen = MaxOpenFiles

// batchRows is how many rows a file's reader decodes at a time.
const batchRows = 256

// Stats describes the work of one pass over a version. Row groups and
// bytes count the version's snapshot files only, not the temporary files
// of a staged merge.
type Stats struct {
	Files            int   `json:"files"`              // files of the version
	FilesSkipped     int   `json:"files_skipped"`      // left unopened: their time range misses the window
	RowGroups        int   `json:"row_groups"`         // row groups of the opened files
	RowGroupsRead    int   `json:"row_groups_read"`    // row groups decoded
	RowGroupsSkipped int   `json:"row_groups_skipped"` // ruled out by column statistics
	RowsRead         int64 `json:"rows_read"`          // rows decoded from snapshot files
	RowsEmitted      int64 `json:"rows_emitted"`       // rows that passed the filter
	BytesRead        int64 `json:"bytes_read"`         // compressed bytes of the column chunks decoded
	Stages           int   `json:"stages"`             // merge stages through temporary files; 0 for a direct merge
}

// Events calls fn for every event of files (a version's manifest entries)
// that passes f, in the order of Compare. The event passed to fn is valid
// only during the call. Files whose MinTime/MaxTime miss f's window are not
// opened; row groups whose column statistics rule out f are not decoded.
// f is validated first (errors wrap ErrBadFilter); an error of fn stops
// the pass and is returned as it is.
func Events(ctx context.Context, src Source, files []catalog.FileEntry, f Filter, fn func(*schema.Event) error) (Stats, error) {
	return events(ctx, src, files, f, false, fn)
}

// events is Events; withRows also sets each event's Row, its place in its
// snapshot file, where the input is one (not a staged merge).
func events(ctx context.Context, src Source, files []catalog.FileEntry, f Filter, withRows bool, fn func(*schema.Event) error) (Stats, error) {
	var st Stats
	if err := f.Validate(); err != nil {
		return st, err
	}
	m := f.compile()
	attrs, err := exportAttributes(files, f)
	if err != nil {
		return st, err
	}
	ins, cleanup, err := plan(ctx, src, files, m, attrs, &st)
	defer cleanup()
	if err != nil {
		return st, err
	}
	for _, in := range ins {
		in.rows = withRows && in.counted
	}
	s := newMerge(ctx, ins, m, &st)
	defer s.close()
	for {
		e, err := s.next()
		if err != nil {
			return st, err
		}
		if e == nil {
			return st, nil
		}
		st.RowsEmitted++
		if err := fn(e); err != nil {
			return st, err
		}
	}
}

// input is one sorted Parquet source of a merge.
type input struct {
	open     func(ctx context.Context) (io.ReaderAt, io.Closer, int64, error)
	min, max time.Time
	counted  bool  // a snapshot file: its work enters Stats
	rows     bool  // set each event's Row (a snapshot file's)
	remap    []int // its event attributes into the export's order (attrRemap)
}

// plan turns files into at most maxOpen inputs, merging in stages through
// temporary files when there are more. cleanup removes those files.
func plan(ctx context.Context, src Source, files []catalog.FileEntry, m *matcher, attrs []catalog.AttributeColumn, st *Stats) ([]*input, func(), error) {
	var temps []string
	cleanup := func() {
		for _, p := range temps {
			os.Remove(p)
		}
	}
	st.Files = len(files)
	var ins []*input
	for _, fe := range files {
		if !fe.MinTime.IsZero() && !fe.MaxTime.IsZero() && !m.spanOK(fe.MinTime.UnixMicro(), fe.MaxTime.UnixMicro()) {
			st.FilesSkipped++
			continue
		}
		id := fe.SHA256
		ins = append(ins, &input{
			open: func(ctx context.Context) (io.ReaderAt, io.Closer, int64, error) {
				r, err := src.Open(ctx, id)
				if err != nil {
					return nil, nil, 0, fmt.Errorf("export: file %s: %w", id, err)
				}
				return r, r, r.Size(), nil
			},
			min: fe.MinTime, max: fe.MaxTime, counted: true,
			remap: attrRemap(attrs, fe.Attributes.Columns()),
		})
	}
	// Neighbours in time go into the same stage, so a stage's output
	// overlaps few others.
	slices.SortStableFunc(ins, func(a, b *input) int { return a.min.Compare(b.min) })
	for len(ins) > maxOpen {
		st.Stages++
		var next []*input
		for lo := 0; lo < len(ins); lo += maxOpen {
			in, path, err := stage(ctx, src.TempDir, ins[lo:min(lo+maxOpen, len(ins))], m, attrs, st)
			if path != "" {
				temps = append(temps, path)
			}
			if err != nil {
				return nil, cleanup, err
			}
			if in != nil {
				next = append(next, in)
			}
		}
		ins = next
	}
	return ins, cleanup, nil
}

// stage merges ins into one temporary Parquet file of every column, in
// merge order, and returns it as an input (nil when no event passed).
func stage(ctx context.Context, dir string, ins []*input, m *matcher, attrs []catalog.AttributeColumn, st *Stats) (*input, string, error) {
	tmp, err := os.CreateTemp(dir, "flowcat-export-*.parquet")
	if err != nil {
		return nil, "", fmt.Errorf("export: stage: %w", err)
	}
	path := tmp.Name()
	defer tmp.Close()
	pw := catalog.NewEventWriter(tmp, schema.Fields, catalog.EventWriterOptions{RowGroupRows: DefaultRowGroupRows, Attrs: attrs})
	s := newMerge(ctx, ins, m, st)
	defer s.close()
	var first, last time.Time
	n := 0
	for {
		e, err := s.next()
		if err != nil {
			return nil, path, err
		}
		if e == nil {
			break
		}
		if n == 0 {
			first = e.OccurredAt
		}
		last = e.OccurredAt
		n++
		if err := pw.Write(e); err != nil {
			return nil, path, err
		}
	}
	if err := pw.Close(); err != nil {
		return nil, path, err
	}
	if n == 0 {
		return nil, path, nil
	}
	return &input{
		open: func(ctx context.Context) (io.ReaderAt, io.Closer, int64, error) {
			f, err := os.Open(path)
			if err != nil {
				return nil, nil, 0, fmt.Errorf("export: stage: %w", err)
			}
			fi, err := f.Stat()
			if err != nil {
				f.Close()
				return nil, nil, 0, fmt.Errorf("export: stage: %w", err)
			}
			return f, f, fi.Size(), nil
		},
		min: first, max: last,
	}, path, nil
}

// merge is a k-way merge of sorted inputs, opened lazily: an input joins
// when the merge reaches its first instant.
type merge struct {
	ctx     context.Context
	m       *matcher
	st      *Stats
	pending []*input // by min, not yet opened
	h       *kway.Heap[*cursor]
	cur     *cursor // cursor whose head was returned last; advanced on next
	all     []*cursor
}

func newMerge(ctx context.Context, ins []*input, m *matcher, st *Stats) *merge {
	p := slices.Clone(ins)
	slices.SortStableFunc(p, func(a, b *input) int { return a.min.Compare(b.min) })
	return &merge{ctx: ctx, m: m, st: st, pending: p,
		h: kway.New(func(a, b *cursor) bool { return Compare(a.head(), b.head()) < 0 })}
}

// next returns the next event, nil at the end.
func (s *merge) next() (*schema.Event, error) {
	if err := s.ctx.Err(); err != nil {
		return nil, err
	}
	if c := s.cur; c != nil {
		s.cur = nil
		if err := c.advance(); err != nil {
			return nil, err
		}
		if c.done {
			s.h.Pop()
			c.close()
		} else {
			s.h.Fix()
		}
	}
	// Open every input that may hold an event at or before the head.
	for len(s.pending) > 0 && (s.h.Len() == 0 || (s.pending[0].min.IsZero() || !s.pending[0].min.After(s.h.Top().head().OccurredAt))) {
		in := s.pending[0]
		s.pending = s.pending[1:]
		c, err := openCursor(s.ctx, in, s.m, s.st)
		if err != nil {
			return nil, err
		}
		s.all = append(s.all, c)
		if c.done {
			c.close()
			continue
		}
		s.h.Push(c)
	}
	if s.h.Len() == 0 {
		return nil, nil
	}
	s.cur = s.h.Top()
	return s.cur.head(), nil
}

func (s *merge) close() {
	for _, c := range s.all {
		c.close()
	}
}

// cursor reads one input's filtered events as runs of equal instants, each
// run sorted by content.
type cursor struct {
	in     *input
	m      *matcher
	st     *Stats
	closer io.Closer
	groups []parquet.RowGroup // row groups to decode
	starts []int64            // the file's row number of each one's first row
	row    int64              // the file's row number of the next row read
	gi     int
	rd     *catalog.EventReader
	buf    []schema.Event
	pos, n int
	run    []schema.Event
	ri     int
	look   schema.Event // first event of the next run
	hasLk  bool
	eof    bool
	done   bool
	closed bool
}

func openCursor(ctx context.Context, in *input, m *matcher, st *Stats) (*cursor, error) {
	ra, closer, size, err := in.open(ctx)
	if err != nil {
		return nil, err
	}
	c := &cursor{in: in, m: m, st: st, closer: closer}
	f, err := parquet.OpenFile(ra, size, parquet.SkipPageIndex(true), parquet.SkipBloomFilters(true))
	if err != nil {
		closer.Close()
		return nil, fmt.Errorf("export: parquet: %w", err)
	}
	cols, err := statColumns(f)
	if err != nil {
		closer.Close()
		return nil, err
	}
	meta := f.Metadata()
	var start int64
	for i, rg := range f.RowGroups() {
		keep := rowGroupOK(rg, cols, m)
		if in.counted {
			st.RowGroups++
			if keep {
				st.RowGroupsRead++
				for _, cc := range meta.RowGroups[i].Columns {
					st.BytesRead += cc.MetaData.TotalCompressedSize
				}
			} else {
				st.RowGroupsSkipped++
			}
		}
		if keep {
			c.groups = append(c.groups, rg)
			c.starts = append(c.starts, start)
		}
		start += rg.NumRows()
	}
	c.buf = make([]schema.Event, batchRows)
	if err := c.fill(); err != nil {
		c.close()
		return nil, err
	}
	return c, nil
}

// statColumns are the leaf indexes of the columns whose statistics the
// row-group test reads.
type statCols struct{ at, site, queue, typ, activity int }

func statColumns(f *parquet.File) (statCols, error) {
	var c statCols
	for _, p := range []struct {
		name string
		dst  *int
	}{{"occurred_at", &c.at}, {"site", &c.site}, {"queue", &c.queue}, {"event_type", &c.typ}, {"activity", &c.activity}} {
		leaf, ok := f.Schema().Lookup(p.name)
		if !ok {
			return c, fmt.Errorf("export: parquet: the file has no %s column", p.name)
		}
		*p.dst = leaf.ColumnIndex
	}
	return c, nil
}

// rowGroupOK reports whether the statistics of rg leave room for an event
// that passes m.
func rowGroupOK(rg parquet.RowGroup, c statCols, m *matcher) bool {
	chunks := rg.ColumnChunks()
	if fc, ok := chunks[c.at].(*parquet.FileColumnChunk); ok {
		if lo, hi, ok := fc.Bounds(); ok && !m.spanOK(lo.Int64(), hi.Int64()) {
			return false
		}
	}
	for _, t := range []struct {
		col int
		s   set
	}{{c.site, m.sites}, {c.queue, m.queues}, {c.typ, m.types}, {c.activity, m.activities}} {
		if t.s == nil {
			continue
		}
		fc, ok := chunks[t.col].(*parquet.FileColumnChunk)
		if !ok {
			continue
		}
		lo, hi, ok := fc.Bounds()
		if !t.s.boundsOK(string(lo.ByteArray()), string(hi.ByteArray()), ok, fc.NullCount(), fc.NumValues()) {
			return false
		}
	}
	return true
}

// raw returns the next event of the input that passes the filter, in file
// order, nil at the end. It points into c.buf.
func (c *cursor) raw() (*schema.Event, error) {
	for {
		for c.pos < c.n {
			e := &c.buf[c.pos]
			c.pos++
			if c.m.match(e) {
				remapAttrs(e, c.in.remap)
				return e, nil
			}
		}
		if c.eof {
			return nil, nil
		}
		if c.rd == nil {
			if c.gi == len(c.groups) {
				c.eof = true
				return nil, nil
			}
			rd, err := catalog.NewEventRowGroupReader(c.groups[c.gi])
			if err != nil {
				return nil, fmt.Errorf("export: %w", err)
			}
			c.rd, c.row = rd, c.starts[c.gi]
			c.gi++
		}
		clear(c.buf)
		n, err := c.rd.Read(c.buf)
		c.pos, c.n = 0, n
		// Each event's place in its snapshot file (Event.Row), for the
		// per-case order of a filtered summary.
		if c.in.rows {
			for i := range c.buf[:n] {
				c.buf[i].Row = c.row + int64(i)
			}
		}
		c.row += int64(n)
		if c.in.counted {
			c.st.RowsRead += int64(n)
		}
		if errors.Is(err, io.EOF) {
			c.rd.Close()
			c.rd = nil
		} else if err != nil {
			return nil, fmt.Errorf("export: parquet: %w", err)
		}
	}
}

// fill reads the next run of equal instants and sorts it by content.
func (c *cursor) fill() error {
	c.run, c.ri = c.run[:0], 0
	if !c.hasLk {
		e, err := c.raw()
		if err != nil {
			return err
		}
		if e == nil {
			c.done = true
			return nil
		}
		cloneEvent(&c.look, e)
	}
	c.run = append(c.run, c.look)
	at := c.look.OccurredAt
	c.hasLk = false
	for {
		e, err := c.raw()
		if err != nil {
			return err
		}
		if e == nil {
			break
		}
		if !e.OccurredAt.Equal(at) {
			if e.OccurredAt.Before(at) {
				return fmt.Errorf("export: a snapshot file is not sorted by occurred_at")
			}
			cloneEvent(&c.look, e)
			c.hasLk = true
			break
		}
		c.run = append(c.run, schema.Event{})
		cloneEvent(&c.run[len(c.run)-1], e)
	}
	if len(c.run) > 1 {
		slices.SortFunc(c.run, func(a, b schema.Event) int { return schema.CompareContent(&a, &b) })
	}
	return nil
}

func (c *cursor) head() *schema.Event { return &c.run[c.ri] }

func (c *cursor) advance() error {
	c.ri++
	if c.ri < len(c.run) {
		return nil
	}
	return c.fill()
}

func (c *cursor) close() {
	if c.closed {
		return
	}
	c.closed = true
	if c.rd != nil {
		c.rd.Close()
		c.rd = nil
	}
	c.closer.Close()
}
