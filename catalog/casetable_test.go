package catalog

import (
	"bytes"
	"io"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// TestCaseRowNulls: optional case-table columns written in batches are
// NULL exactly where the row has no value, read back by Apache Arrow:
// runs, alternations and whole row groups of nulls.
func TestCaseRowNulls(t *testing.T) {
	var rows []cases.Row
	wantNull := 0
	for i := range 5000 {
		r := cases.Row{CaseID: "c", Site: "s", FirstAt: time.Unix(int64(i), 0).UTC(), LastAt: time.Unix(int64(i), 0).UTC()}
		if (i/7)%3 != 0 && i%2 == 0 {
			x := float64(i)
			r.WaitSeconds = &x
			s := "subj"
			r.SubjectID = &s
		} else {
			wantNull++
		}
		rows = append(rows, r)
	}
	for i := 1400; i < 2100; i++ { // one whole row group of nulls
		if rows[i].WaitSeconds != nil {
			rows[i].WaitSeconds, rows[i].SubjectID = nil, nil
			wantNull++
		}
	}
	dir := t.TempDir()
	cw, err := newCaseTableWriter(dir, 700, "k")
	if err != nil {
		t.Fatal(err)
	}
	defer cw.Remove()
	for i := range rows {
		cw.add(&rows[i])
	}
	if _, err := cw.Finish(); err != nil {
		t.Fatal(err)
	}
	b, err := io.ReadAll(cw.f)
	if err != nil {
		t.Fatal(err)
	}
	pf, err := file.NewParquetReader(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	for _, name := range []string{"wait_seconds", "subject_id"} {
		n := 0
		for _, c := range tbl.Column(tbl.Schema().FieldIndices(name)[0]).Data().Chunks() {
			n += c.NullN()
		}
		if n != wantNull {
			t.Errorf("%s: %d nulls, want %d", name, n, wantNull)
		}
	}
}
