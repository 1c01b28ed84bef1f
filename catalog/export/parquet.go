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

// Layout names the bytes this package's writers make of a version: it
// changes whenever they would write other bytes for the same request
// (encodings, metadata, bundle entries), so a server's ETags change with
// it. "2": PLAIN and dictionary encodings, sorting columns, the filter in
// the metadata, quality.json in bundles.
const Layout = "2"

// MetaFilter is the key-value metadata entry of an export that records
// its filter (Filter.Query; empty for the whole version).
const MetaFilter = "flowcat.filter"

// ParquetOptions tune WriteParquet. The zero value is the default.
type ParquetOptions struct {
	RowGroupRows int64 // rows per row group; default DefaultRowGroupRows
	// Metadata is added to the file's key/value metadata (written sorted
	// by key), such as the dataset, version and snapshot id exported.
	// flowcat.schema_version and flowcat.filter are always set.
	Metadata map[string]string
}

// WriteParquet writes the events of files that pass f, in the order of
// Events, to w as one zstd-compressed Parquet file holding f's columns
// with the snapshots' physical and logical types (occurred_at
// TIMESTAMP(MICROS, UTC), strings STRING, dictionary-encoded where the
// snapshots are). Output is streamed: only the row group being built is
// in memory. The same inputs give the same bytes. Event attributes follow
// the schema's columns with the snapshots' types (exportAttributes).
func WriteParquet(ctx context.Context, w io.Writer, src Source, files []catalog.FileEntry, f Filter, opt ParquetOptions) (Stats, error) {
	if err := f.Validate(); err != nil {
		return Stats{}, err
	}
	rows := opt.RowGroupRows
	if rows <= 0 {
		rows = DefaultRowGroupRows
	}
	keys := slices.Sorted(maps.Keys(opt.Metadata))
	kv := make([]catalog.KeyValue, 0, len(keys)+1)
	for _, k := range keys {
		if k != MetaFilter {
			kv = append(kv, catalog.KeyValue{Key: k, Value: opt.Metadata[k]})
		}
	}
	kv = append(kv, catalog.KeyValue{Key: MetaFilter, Value: f.Query()})
	attrs, err := exportAttributes(files, f)
	if err != nil {
		return Stats{}, err
	}
	pw := catalog.NewEventWriter(w, f.columns(), catalog.EventWriterOptions{RowGroupRows: rows, Metadata: kv, Attrs: attrs})
	st, err := Events(ctx, src, files, f, pw.Write)
	if err != nil {
		return st, err
	}
	return st, pw.Close()
}
