package export

import (
	"context"
	"fmt"
	"io"
	"reflect"
	"strings"
	"sync"
	"unsafe"

	"github.com/parquet-go/parquet-go"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

// DefaultRowGroupRows bounds the rows of a row group that WriteParquet
// writes when ParquetOptions does not say.
const DefaultRowGroupRows = 128 << 10

// CreatedBy is the created_by string of every Parquet file this package
// writes: the same as the catalog's snapshots, naming no library version,
// build or time, so that output bytes do not change with the build.
const CreatedBy = "flowcat version schema-" + schema.Version + "(build )"

// ParquetOptions tune WriteParquet. The zero value is the default.
type ParquetOptions struct {
	RowGroupRows int64 // rows per row group; default DefaultRowGroupRows
	// Metadata is added to the file's key/value metadata (written sorted
	// by key). flowcat.schema_version is always set.
	Metadata map[string]string
}

// WriteParquet writes the events of files that pass f, in the order of
// Events, to w as one zstd-compressed Parquet file holding f's columns
// with the snapshots' physical and logical types (occurred_at
// TIMESTAMP(MICROS, UTC), strings STRING, dictionary-encoded where the
// snapshots are). Output is streamed: only the row group being built is
// in memory. The same inputs give the same bytes.
func WriteParquet(ctx context.Context, w io.Writer, src Source, files []catalog.FileEntry, f Filter, opt ParquetOptions) (Stats, error) {
	if err := f.Validate(); err != nil {
		return Stats{}, err
	}
	rows := opt.RowGroupRows
	if rows <= 0 {
		rows = DefaultRowGroupRows
	}
	pw := newParquetWriter(w, f.columns(), rows, opt.Metadata)
	st, err := Events(ctx, src, files, f, pw.Write)
	if err != nil {
		return st, err
	}
	return st, pw.Close()
}

// parquetWriter writes events as rows of a column subset.
type parquetWriter struct {
	//lint:ignore SA1019 the generic writer needs a Go type; a column subset is a schema built at run time
	w     *parquet.Writer
	cols  []schema.Field
	batch []parquet.Row
	n     int
}

const writeBatch = 512

func newParquetWriter(w io.Writer, cols []schema.Field, rowGroupRows int64, kv map[string]string) *parquetWriter {
	opts := []parquet.WriterOption{
		subsetSchema(cols),
		parquet.Compression(catalog.PageCodec),
		parquet.MaxRowsPerRowGroup(rowGroupRows),
		parquet.CreatedBy("flowcat", "schema-"+schema.Version, ""),
		parquet.KeyValueMetadata("flowcat.schema_version", schema.Version),
	}
	for k, v := range kv {
		opts = append(opts, parquet.KeyValueMetadata(k, v))
	}
	pw := &parquetWriter{w: parquet.NewWriter(w, opts...), cols: cols, batch: make([]parquet.Row, writeBatch)}
	for i := range pw.batch {
		pw.batch[i] = make(parquet.Row, len(cols))
	}
	return pw
}

var (
	eventType   = reflect.TypeFor[schema.Event]()
	schemaCache sync.Map // column list -> *parquet.Schema
)

// subsetSchema is the Parquet schema of schema.Event restricted to cols:
// a struct type of the same fields and tags, so node types, logical types
// and encodings are those of the snapshots.
func subsetSchema(cols []schema.Field) *parquet.Schema {
	key := fmt.Sprint(cols)
	if s, ok := schemaCache.Load(key); ok {
		return s.(*parquet.Schema)
	}
	var fields []reflect.StructField
	for _, c := range cols {
		for i := range eventType.NumField() {
			sf := eventType.Field(i)
			if name, _, _ := strings.Cut(sf.Tag.Get("parquet"), ","); name == string(c) {
				fields = append(fields, reflect.StructField{Name: sf.Name, Type: sf.Type, Tag: sf.Tag})
			}
		}
	}
	s := parquet.SchemaOf(reflect.New(reflect.StructOf(fields)).Elem().Interface())
	schemaCache.Store(key, s)
	return s
}

// Write appends e.
func (pw *parquetWriter) Write(e *schema.Event) error {
	row := pw.batch[pw.n][:0]
	for i, c := range pw.cols {
		var v parquet.Value
		switch {
		case c == schema.FieldOccurredAt:
			v = parquet.Int64Value(e.OccurredAt.UnixMicro()).Level(0, 0, i)
		case c.Required():
			v = bytesValue(e.Value(c)).Level(0, 0, i)
		default:
			if s := e.Value(c); s == "" {
				v = parquet.NullValue().Level(0, 0, i)
			} else {
				v = bytesValue(s).Level(0, 1, i)
			}
		}
		row = append(row, v)
	}
	pw.batch[pw.n] = row
	pw.n++
	if pw.n == len(pw.batch) {
		return pw.flush()
	}
	return nil
}

// bytesValue wraps s without copying: the writer copies values into its
// column buffers before WriteRows returns, and strings are immutable.
func bytesValue(s string) parquet.Value {
	return parquet.ByteArrayValue(unsafe.Slice(unsafe.StringData(s), len(s)))
}

func (pw *parquetWriter) flush() error {
	if pw.n == 0 {
		return nil
	}
	if _, err := pw.w.WriteRows(pw.batch[:pw.n]); err != nil {
		return fmt.Errorf("export: parquet: %w", err)
	}
	pw.n = 0
	return nil
}

// Close writes the footer.
func (pw *parquetWriter) Close() error {
	if err := pw.flush(); err != nil {
		return err
	}
	if err := pw.w.Close(); err != nil {
		return fmt.Errorf("export: parquet: %w", err)
	}
	return nil
}
