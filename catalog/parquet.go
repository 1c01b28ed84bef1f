package catalog

import (
	"crypto/sha256"
	"fmt"
	"hash"
	"io"
	"os"
	"runtime"
	"sync"
	"time"

	"github.com/klauspost/compress/zstd"
	"github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/compress"
	parquetzstd "github.com/parquet-go/parquet-go/compress/zstd"

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

// EventReader decodes the events of a snapshot file or row group. Every
// reader of snapshot events goes through it: parquet-go turns a TIMESTAMP
// into a time.Time by way of int64 nanoseconds, which hold only the
// instants of 1677-09-21 to 2262-04-11, while occurred_at holds any instant
// of the years 0001-9999 in microseconds; EventReader takes occurred_at
// from its stored microseconds instead.
type EventReader struct {
	r    *parquet.GenericReader[schema.Event]
	at   int // leaf column of occurred_at
	rows []parquet.Row
}

// NewEventReader reads events through r, a reader of snapshot rows (from
// parquet.NewGenericReader or NewGenericRowGroupReader); it fails when r's
// schema has no occurred_at column.
func NewEventReader(r *parquet.GenericReader[schema.Event]) (*EventReader, error) {
	leaf, ok := r.Schema().Lookup(string(schema.FieldOccurredAt))
	if !ok {
		r.Close()
		return nil, fmt.Errorf("parquet: the file has no %s column", schema.FieldOccurredAt)
	}
	return &EventReader{r: r, at: leaf.ColumnIndex}, nil
}

// Read decodes up to len(buf) events into buf. Like io.Reader it returns
// the number read and io.EOF at the end; it may read fewer than len(buf)
// before the end.
func (er *EventReader) Read(buf []schema.Event) (int, error) {
	if cap(er.rows) < len(buf) {
		er.rows = make([]parquet.Row, len(buf))
	}
	rows := er.rows[:len(buf)]
	n, err := er.r.ReadRows(rows)
	sch := er.r.Schema()
	for i, row := range rows[:n] {
		if rerr := sch.Reconstruct(&buf[i], row); rerr != nil {
			return i, rerr
		}
		for _, v := range row {
			if v.Column() == er.at {
				if v.IsNull() {
					buf[i].OccurredAt = time.Time{}
				} else {
					buf[i].OccurredAt = time.UnixMicro(v.Int64()).UTC()
				}
				break
			}
		}
	}
	return n, err
}

// Close releases the underlying reader.
func (er *EventReader) Close() error { return er.r.Close() }
