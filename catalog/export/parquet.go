package export

import (
	"context"
	"io"
	"maps"
	"slices"

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
	keys := slices.Sorted(maps.Keys(opt.Metadata))
	kv := make([]catalog.KeyValue, len(keys))
	for i, k := range keys {
		kv[i] = catalog.KeyValue{Key: k, Value: opt.Metadata[k]}
	}
	pw := catalog.NewEventWriter(w, f.columns(), catalog.EventWriterOptions{RowGroupRows: rows, Metadata: kv})
	st, err := Events(ctx, src, files, f, pw.Write)
	if err != nil {
		return st, err
	}
	return st, pw.Close()
}
