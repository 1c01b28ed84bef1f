// Package arrowtest reads Parquet files whole with Apache Arrow's Go
// reader (arrow-go), the independent reader the tests hold flowcat's
// files against. Only tests import it.
package arrowtest

import (
	"context"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
)

// Table reads every row group of pf into one table, failing t if arrow-go
// cannot; the caller releases the table.
func Table(t testing.TB, pf *file.Reader) arrow.Table {
	t.Helper()
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 4096}, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	tbl, err := fr.ReadTable(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	return tbl
}
