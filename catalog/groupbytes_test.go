package catalog

import (
	"bytes"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema"
)

// TestRowGroupBytesBound: rows of long free text end their row group
// once its string values reach maxGroupBytes, before its 65,536 rows,
// so that the writer's dictionaries and pages stay bounded; the file
// reads back whole with an independent reader (arrow-go), every value in
// order. Short rows keep whole row groups (TestParquetBytesUnchanged).
func TestRowGroupBytesBound(t *testing.T) {
	const n = 40000
	pad := strings.Repeat("free text mapped to activity; ", 34) // about 1 KB
	var buf bytes.Buffer
	w := NewEventWriter(&buf, schema.Fields, EventWriterOptions{RowGroupRows: 1 << 16})
	at := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	for i := range n {
		e := schema.Event{Site: "north", CaseID: fmt.Sprintf("c%d", i), Type: schema.Arrival, Activity: fmt.Sprintf("%06d %s", i, pad), OccurredAt: at.Add(time.Duration(i) * time.Second)}
		if err := w.Write(&e); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	pf, err := file.NewParquetReader(bytes.NewReader(buf.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	// The string bytes of row i: site, case id, event type, activity.
	rowBytes := func(i int) int {
		return len("north") + len(fmt.Sprintf("c%d", i)) + len("arrival") + len(fmt.Sprintf("%06d %s", i, pad))
	}
	groups, row := pf.NumRowGroups(), 0
	if groups < 2 {
		t.Fatalf("%d row group for %d rows of about 1 KB", groups, n)
	}
	for g := range groups {
		rows := int(pf.MetaData().RowGroup(g).NumRows())
		b := 0
		for i := row; i < row+rows; i++ {
			b += rowBytes(i)
		}
		row += rows
		// Each group but the last reaches the bound, and passes it by
		// less than a row.
		if g < groups-1 && (b < maxGroupBytes || b >= maxGroupBytes+rowBytes(row-1)) {
			t.Errorf("row group %d: %d rows, %d bytes of strings; want the first rows past %d", g, rows, b, maxGroupBytes)
		}
	}
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	col := tbl.Column(tbl.Schema().FieldIndices("activity")[0])
	i := 0
	for _, c := range col.Data().Chunks() {
		s := c.(*array.String)
		for j := range s.Len() {
			if want := fmt.Sprintf("%06d %s", i, pad); s.Value(j) != want {
				t.Fatalf("row %d: activity %.20q..., want %.20q...", i, s.Value(j), want)
			}
			i++
		}
	}
	if i != n {
		t.Errorf("read %d rows, want %d", i, n)
	}
}
