package catalog

import (
	"crypto/sha256"
	"fmt"
	"hash"
	"io"
	"os"
	"runtime"
	"sync"

	"github.com/klauspost/compress/zstd"
	"github.com/parquet-go/parquet-go"
	parquetzstd "github.com/parquet-go/parquet-go/compress/zstd"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
)

// This file is the one Parquet writer of every file flowcat stores or
// serves (snapshots, export files, case tables, case attribute tables):
// fileOptions is the one place that sets a writer's options, tempTable the
// temporary file a stored table is written to while hashed, and
// columnWriter the one writer of rows handed over column by column.

// KeyValue is one entry of a Parquet file's key-value metadata.
type KeyValue struct{ Key, Value string }

// fileSettings are what differs between the Parquet files flowcat writes;
// everything else is fixed by fileOptions.
type fileSettings struct {
	RowGroupRows int64      // rows per row group; required
	Metadata     []KeyValue // key-value metadata, after flowcat.schema_version
	// SortedBy, when not empty, is the column recorded as each row
	// group's ascending sorting column (the writer does not reorder rows).
	SortedBy string
}

// fileOptions are the writer options of a file of schema sch (nil: the
// row type's) and settings s: zstd pages (pageCompression), bounded row
// groups and a created_by that names no build or time, so that the same
// rows always give the same bytes.
func fileOptions(sch *parquet.Schema, s fileSettings) []parquet.WriterOption {
	var opts []parquet.WriterOption
	if sch != nil {
		opts = append(opts, sch)
	}
	opts = append(opts,
		pageCompression(),
		parquet.MaxRowsPerRowGroup(s.RowGroupRows),
		parquet.CreatedBy("flowcat", "schema-"+schema.Version, ""),
		parquet.KeyValueMetadata("flowcat.schema_version", schema.Version),
	)
	for _, kv := range s.Metadata {
		opts = append(opts, parquet.KeyValueMetadata(kv.Key, kv.Value))
	}
	if s.SortedBy != "" {
		opts = append(opts, parquet.SortingWriterConfig(parquet.SortingColumns(parquet.Ascending(s.SortedBy))))
	}
	return opts
}

// tempTable is a stored Parquet file being written to a temporary file
// while hashed and counted; the caller then hands it to a blob.Store.
type tempTable struct {
	f    *os.File
	h    hash.Hash
	n    int64
	what string // for errors: "parquet", "case table", ...
}

func newTempTable(dir, pattern, what string) (*tempTable, error) {
	f, err := os.CreateTemp(dir, pattern)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	return &tempTable{f: f, h: sha256.New(), what: what}, nil
}

// out is where the file's bytes go.
func (t *tempTable) out() io.Writer { return io.MultiWriter(t.f, t.h, countWriter{&t.n}) }

// done rewinds the written file and returns its id and size. The blob
// store makes it durable (Store.putTemp).
func (t *tempTable) done() (blob.ID, int64, error) {
	if _, err := t.f.Seek(0, io.SeekStart); err != nil {
		return blob.ID{}, 0, fmt.Errorf("%s: %w", t.what, err)
	}
	return blob.ID(t.h.Sum(nil)), t.n, nil
}

// drop closes and deletes the temporary file.
func (t *tempTable) drop() {
	t.f.Close()
	os.Remove(t.f.Name())
}

type countWriter struct{ n *int64 }

func (c countWriter) Write(p []byte) (int, error) {
	*c.n += int64(len(p))
	return len(p), nil
}

// columnWriter writes rows of a schema built at run time column by column:
// each column's values of a run of rows go to its column writer at once,
// with their own definition levels (so NULLs are exact), without
// assembling rows.
//
// Rows are cut as parquet-go's own row writers cut them, so the bytes are
// theirs: runs of at most 64 rows within each batch of writeBatch rows
// (counted from the file's first row), never across a row group, with a
// column's page flushed when its buffer is full after a run.
type columnWriter struct {
	w          *parquet.GenericWriter[any]
	max        int64 // rows per row group
	inGroup    int64 // rows in the current row group
	groupBytes int   // bytes of the current row group's string values
	rows       int64 // rows written
	vals       []parquet.Value
}

// maxGroupBytes ends a row group before its rows do once its string
// values reach it: parquet-go holds a row group's dictionaries and pages
// until it is written, so 65,536 rows of long free text (1 KB an activity)
// would hold 130 MB. An event of the schema's columns takes about 100
// bytes of strings: row groups of rows under 256 bytes end at 65,536
// rows as before, so their bytes do not change.
const maxGroupBytes = 16 << 20

// writeBatch is the batch of rows whose runs the writer cuts separately
// (what EventWriter once handed parquet-go per call).
const writeBatch = 512

// maxRun is the most rows parquet-go's row writers write between checks
// of the page size.
const maxRun = 64

func newColumnWriter(out io.Writer, sch *parquet.Schema, s fileSettings) *columnWriter {
	return &columnWriter{w: parquet.NewGenericWriter[any](out, fileOptions(sch, s)...), max: s.RowGroupRows}
}

// fillFunc appends to dst the values of column col for rows [i, j) of
// what is being written, with levels and column index set, and returns it.
type fillFunc func(dst []parquet.Value, col, i, j int) ([]parquet.Value, error)

// write writes n rows, each column's values given by fill.
func (cw *columnWriter) write(n int, fill fillFunc) error {
	for i := 0; i < n; {
		if cw.inGroup == cw.max || cw.groupBytes >= maxGroupBytes {
			if err := cw.w.Flush(); err != nil {
				return fmt.Errorf("parquet: %w", err)
			}
			cw.inGroup, cw.groupBytes = 0, 0
		}
		batchEnd := (cw.rows/writeBatch + 1) * writeBatch
		run := min(maxRun, int64(n-i), cw.max-cw.inGroup, batchEnd-cw.rows)
		if cw.inGroup > 0 {
			// Rows as long as the group's so far, to end it near the bound.
			per := int64(cw.groupBytes)/cw.inGroup + 1
			run = max(1, min(run, int64(maxGroupBytes-cw.groupBytes)/per+1))
		}
		j := i + int(run)
		for c, col := range cw.w.ColumnWriters() {
			vals, err := fill(cw.vals[:0], c, i, j)
			if err != nil {
				return err
			}
			cw.vals = vals
			for k := range vals {
				if vals[k].Kind() == parquet.ByteArray {
					cw.groupBytes += len(vals[k].ByteArray())
				}
			}
			if _, err := col.WriteRowValues(vals); err != nil {
				return fmt.Errorf("parquet: %w", err)
			}
		}
		clear(cw.vals) // drop references to the rows' strings
		cw.inGroup += run
		cw.rows += run
		i = j
	}
	return nil
}

// close writes the last row group and the footer; it does not close the
// underlying writer.
func (cw *columnWriter) close() error {
	if err := cw.w.Close(); err != nil {
		return fmt.Errorf("parquet: %w", err)
	}
	return nil
}

// pageCompression is the page codec of every Parquet file flowcat writes:
// zstd at its default level, as parquet-go's codec, but with a 1 MiB
// window. Pages are at most a few hundred KiB, so the library's default
// 8 MiB window finds nothing more and costs 16 MiB of history per
// encoder, held for the whole write. One encoder set serves all writers;
// each page is compressed on its own, so the bytes do not depend on what
// else is being written. The codec is reachable only through fileOptions,
// so no caller can replace it or change its settings (they are part of the
// stored bytes).
func pageCompression() parquet.WriterOption { return parquet.Compression(pageCodec) }

var pageCodec = &windowedZstd{}

type windowedZstd struct {
	parquetzstd.Codec // String, CompressionCodec, Decode
	once              sync.Once
	enc               *zstd.Encoder
	err               error
}

// Encode implements parquet-go's compress.Codec.
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
