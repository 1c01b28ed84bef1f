package catalog

import (
	"crypto/sha256"
	"fmt"
	"hash"
	"io"
	"os"
	"reflect"
	"runtime"
	"strings"
	"sync"
	"time"

	"github.com/klauspost/compress/zstd"
	"github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/compress"
	parquetzstd "github.com/parquet-go/parquet-go/compress/zstd"
	"github.com/parquet-go/parquet-go/format"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
)

// snapshotWriter writes one snapshot Parquet file to a temporary path while
// hashing it. Writer settings are fixed (zstd, bounded row groups, a
// created_by that names no build or time) so that the same events always
// give the same bytes.
type snapshotWriter struct {
	f     *os.File
	h     hash.Hash
	n     int64
	w     *parquet.GenericWriter[schema.Event]
	batch []schema.Event
	rows  int64
	min   time.Time
	max   time.Time
}

// derivedFrom, when not empty, is written into the file's metadata: a file
// rewritten by replace-window thus never has the bytes of another file.
func newSnapshotWriter(dir string, rowGroupRows int64, keyID string, derivedFrom ...string) (*snapshotWriter, error) {
	f, err := os.CreateTemp(dir, "snapshot-*.parquet")
	if err != nil {
		return nil, fmt.Errorf("parquet: %w", err)
	}
	sw := &snapshotWriter{f: f, h: sha256.New(), batch: make([]schema.Event, 0, 1024)}
	opts := []parquet.WriterOption{
		parquet.Compression(PageCodec),
		parquet.MaxRowsPerRowGroup(rowGroupRows),
		parquet.CreatedBy("flowcat", "schema-"+schema.Version, ""),
		parquet.KeyValueMetadata("flowcat.schema_version", schema.Version),
		parquet.KeyValueMetadata("flowcat.pseudonym_key_id", keyID),
	}
	for _, d := range derivedFrom {
		opts = append(opts, parquet.KeyValueMetadata("flowcat.derived_from", d))
	}
	sw.w = parquet.NewGenericWriter[schema.Event](io.MultiWriter(f, sw.h, countWriter{&sw.n}), opts...)
	return sw, nil
}

// Write appends e; events must come in occurred_at order.
func (sw *snapshotWriter) Write(e *schema.Event) error {
	if sw.rows == 0 {
		sw.min = e.OccurredAt
	}
	sw.max = e.OccurredAt
	sw.rows++
	sw.batch = append(sw.batch, *e)
	if len(sw.batch) == cap(sw.batch) {
		return sw.flushBatch()
	}
	return nil
}

func (sw *snapshotWriter) flushBatch() error {
	if _, err := sw.w.Write(sw.batch); err != nil {
		return fmt.Errorf("parquet: %w", err)
	}
	clear(sw.batch)
	sw.batch = sw.batch[:0]
	return nil
}

// Finish completes the file and makes it durable; it returns the file's id
// and size. The caller then hands the file to a blob.Store.
func (sw *snapshotWriter) Finish() (blob.ID, int64, error) {
	if err := sw.flushBatch(); err != nil {
		return blob.ID{}, 0, err
	}
	if err := sw.w.Close(); err != nil {
		return blob.ID{}, 0, fmt.Errorf("parquet: %w", err)
	}
	if err := sw.f.Sync(); err != nil {
		return blob.ID{}, 0, fmt.Errorf("parquet: %w", err)
	}
	if _, err := sw.f.Seek(0, io.SeekStart); err != nil {
		return blob.ID{}, 0, fmt.Errorf("parquet: %w", err)
	}
	return blob.ID(sw.h.Sum(nil)), sw.n, nil
}

// Remove closes and deletes the temporary file.
func (sw *snapshotWriter) Remove() {
	sw.f.Close()
	os.Remove(sw.f.Name())
}

// PageCodec compresses the pages of every Parquet file flowcat writes
// (snapshots here, exports in catalog/export): zstd at its default
// level, as parquet-go's codec, but with a 1 MiB window. Pages are at most
// a few hundred KiB, so the library's default 8 MiB window finds nothing
// more and costs 16 MiB of history per encoder, held for the whole write.
// One encoder set serves all ingests; each page is compressed on its own,
// so the bytes do not depend on what else is being written.
var PageCodec compress.Codec = &windowedZstd{}

type windowedZstd struct {
	parquetzstd.Codec // String, CompressionCodec, Decode
	once              sync.Once
	enc               *zstd.Encoder
	err               error
}

// Encode implements compress.Codec.
func (c *windowedZstd) Encode(dst, src []byte) ([]byte, error) {
	c.once.Do(func() {
		c.enc, c.err = zstd.NewWriter(nil,
			zstd.WithEncoderLevel(zstd.SpeedDefault),
			zstd.WithWindowSize(1<<20),
			zstd.WithEncoderConcurrency(runtime.GOMAXPROCS(0)),
			zstd.WithZeroFrames(true),
			zstd.WithEncoderCRC(false),
		)
	})
	if c.err != nil {
		return nil, fmt.Errorf("zstd: %w", c.err)
	}
	return c.enc.EncodeAll(src, dst[:0]), nil
}

type countWriter struct{ n *int64 }

func (c countWriter) Write(p []byte) (int, error) {
	*c.n += int64(len(p))
	return len(p), nil
}

// ReadSnapshot calls fn for every event of a snapshot Parquet file, in file
// order. The event passed to fn is only valid during the call.
func ReadSnapshot(r io.ReaderAt, size int64, fn func(*schema.Event) error) error {
	f, err := parquet.OpenFile(r, size)
	if err != nil {
		return fmt.Errorf("parquet: %w", err)
	}
	er, err := NewEventReader(parquet.NewGenericReader[schema.Event](f))
	if err != nil {
		return err
	}
	defer er.Close()
	buf := make([]schema.Event, 1024)
	for {
		n, err := er.Read(buf)
		for i := range buf[:n] {
			if ferr := fn(&buf[i]); ferr != nil {
				return ferr
			}
		}
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return fmt.Errorf("parquet: %w", err)
		}
	}
}

// RowReader decodes rows of T (snapshot events, case table rows) from
// Parquet. Every reader of stored rows goes through it: parquet-go turns a
// TIMESTAMP into a time.Time by way of int64 nanoseconds, which hold only
// the instants of 1677-09-21 to 2262-04-11, while the instants flowcat
// stores span the years 0001-9999 in microseconds; RowReader takes each
// time.Time or *time.Time field of T (top level) that a TIMESTAMP column
// feeds from the column's stored value instead.
type RowReader[T any] struct {
	r     *parquet.GenericReader[T]
	times []timeColumn
	rows  []parquet.Row
}

// EventReader reads the events of a snapshot file or row group.
type EventReader = RowReader[schema.Event]

// timeColumn maps one TIMESTAMP leaf column to a field of the row type.
type timeColumn struct {
	col   int
	field int  // index of the struct field
	ptr   bool // *time.Time
	unit  time.Duration
}

// NewEventReader reads events through r (from parquet.NewGenericReader or
// NewGenericRowGroupReader); it fails when r's schema has no occurred_at
// column.
func NewEventReader(r *parquet.GenericReader[schema.Event]) (*EventReader, error) {
	if _, ok := r.Schema().Lookup(string(schema.FieldOccurredAt)); !ok {
		r.Close()
		return nil, fmt.Errorf("parquet: the file has no %s column", schema.FieldOccurredAt)
	}
	return NewRowReader(r), nil
}

// NewRowReader reads rows of T through r.
func NewRowReader[T any](r *parquet.GenericReader[T]) *RowReader[T] {
	rr := &RowReader[T]{r: r}
	typ := reflect.TypeFor[T]()
	timeType := reflect.TypeFor[time.Time]()
	for i := range typ.NumField() {
		f := typ.Field(i)
		ptr := f.Type.Kind() == reflect.Pointer
		if f.Type != timeType && !(ptr && f.Type.Elem() == timeType) {
			continue
		}
		name, _, _ := strings.Cut(f.Tag.Get("parquet"), ",")
		if name == "" {
			name = f.Name
		}
		leaf, ok := r.Schema().Lookup(name)
		if !ok {
			continue
		}
		lt := leaf.Node.Type().LogicalType()
		if lt == nil {
			continue
		}
		ts, ok := lt.Value.(*format.TimestampType)
		if !ok {
			continue
		}
		unit := time.Nanosecond
		switch ts.Unit.Value.(type) {
		case *format.MicroSeconds:
			unit = time.Microsecond
		case *format.MilliSeconds:
			unit = time.Millisecond
		}
		rr.times = append(rr.times, timeColumn{col: leaf.ColumnIndex, field: i, ptr: ptr, unit: unit})
	}
	return rr
}

// Read decodes up to len(buf) rows into buf. Like io.Reader it returns
// the number read and io.EOF at the end; it may read fewer than len(buf)
// before the end.
func (rr *RowReader[T]) Read(buf []T) (int, error) {
	if cap(rr.rows) < len(buf) {
		rr.rows = make([]parquet.Row, len(buf))
	}
	rows := rr.rows[:len(buf)]
	n, err := rr.r.ReadRows(rows)
	sch := rr.r.Schema()
	for i, row := range rows[:n] {
		if rerr := sch.Reconstruct(&buf[i], row); rerr != nil {
			return i, rerr
		}
		if len(rr.times) == 0 {
			continue
		}
		rv := reflect.ValueOf(&buf[i]).Elem()
		for _, tc := range rr.times {
			for _, v := range row {
				if v.Column() != tc.col {
					continue
				}
				// Through typed pointers, so no value is boxed.
				fp := rv.Field(tc.field).Addr().Interface()
				switch {
				case tc.ptr && v.IsNull():
					*fp.(**time.Time) = nil
				case tc.ptr:
					t := storedInstant(v.Int64(), tc.unit)
					*fp.(**time.Time) = &t
				case v.IsNull():
					*fp.(*time.Time) = time.Time{}
				default:
					*fp.(*time.Time) = storedInstant(v.Int64(), tc.unit)
				}
				break
			}
		}
	}
	return n, err
}

// storedInstant is the UTC instant of a TIMESTAMP value v in unit.
func storedInstant(v int64, unit time.Duration) time.Time {
	switch unit {
	case time.Microsecond:
		return time.UnixMicro(v).UTC()
	case time.Millisecond:
		return time.UnixMilli(v).UTC()
	}
	return time.Unix(0, v).UTC()
}

// Close releases the underlying reader.
func (rr *RowReader[T]) Close() error { return rr.r.Close() }
