package catalog

import (
	"fmt"
	"io"

	"github.com/parquet-go/parquet-go"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// CaseTableEntry is a version's case table: one Parquet row per case of
// the version (cases.Row), in case_id order, computed over every file of
// the version.
type CaseTableEntry struct {
	SHA256 blob.ID `json:"sha256"`
	Bytes  int64   `json:"bytes"`
	Rows   int64   `json:"rows"`
}

// caseTableWriter writes the case table to a temporary file while hashing
// it, with the snapshot writer's fixed settings. It is a cases.Observer.
type caseTableWriter struct {
	*tempTable
	w     *parquet.GenericWriter[cases.Row]
	batch *batches[cases.Row] // written on another goroutine
	rows  int64
	err   error
}

// caseTableBatches is how many batches of 1024 rows wait for the case
// table's writer (see batches).
const caseTableBatches = 4

func newCaseTableWriter(dir string, rowGroupRows int64, keyID string) (*caseTableWriter, error) {
	t, err := newTempTable(dir, "cases-*.parquet", "case table")
	if err != nil {
		return nil, err
	}
	cw := &caseTableWriter{tempTable: t}
	// cases.Row is a fixed struct, so its rows go through parquet-go's
	// writer of Go structs, with the options of every file (fileOptions).
	// Optional columns are pointers, which keep their nulls exactly in
	// batches (TestCaseRowNulls reads them back with Arrow).
	cw.w = parquet.NewGenericWriter[cases.Row](t.out(), fileOptions(nil, fileSettings{RowGroupRows: rowGroupRows,
		Metadata: []KeyValue{{"flowcat.pseudonym_key_id", keyID}, {"flowcat.table", "cases"}}})...)
	cw.batch = newBatches(1024, caseTableBatches, func(rows []cases.Row) error {
		if _, err := cw.w.Write(rows); err != nil {
			return fmt.Errorf("case table: %w", err)
		}
		return nil
	})
	return cw, nil
}

func (cw *caseTableWriter) Event(*schema.Event)    {}
func (cw *caseTableWriter) Wait(*cases.Wait)       {}
func (cw *caseTableWriter) Service(*cases.Service) {}

// Case writes r's row.
func (cw *caseTableWriter) Case(r *cases.Record) {
	row := r.Row()
	cw.add(&row)
}

func (cw *caseTableWriter) add(row *cases.Row) {
	if cw.err != nil {
		return
	}
	cw.rows++
	cw.err = cw.batch.add(*row)
}

// Finish completes the file and returns its entry.
func (cw *caseTableWriter) Finish() (*CaseTableEntry, error) {
	if err := cw.batch.close(); err != nil && cw.err == nil {
		cw.err = err
	}
	if cw.err != nil {
		return nil, cw.err
	}
	if err := cw.w.Close(); err != nil {
		return nil, fmt.Errorf("case table: %w", err)
	}
	id, n, err := cw.done()
	if err != nil {
		return nil, err
	}
	return &CaseTableEntry{SHA256: id, Bytes: n, Rows: cw.rows}, nil
}

// Remove closes and deletes the temporary file.
func (cw *caseTableWriter) Remove() {
	cw.batch.close()
	cw.drop()
}

// ReadCaseTable calls fn for every row of a case table file, in order.
func ReadCaseTable(r io.ReaderAt, size int64, fn func(*cases.Row) error) error {
	return readFile(r, size, "case table", 256, func(f *parquet.File) (*RowReader[cases.Row], error) {
		return NewRowReader(parquet.NewGenericReader[cases.Row](f)), nil
	}, fn)
}
