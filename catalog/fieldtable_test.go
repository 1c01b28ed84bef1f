package catalog

import (
	"bytes"
	"os"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestFieldTableIsSnapshotLayout writes a fresh snapshot of one event with
// every field of the field table set and reads it with arrow-go, an
// independent Parquet reader: the file's columns are the table's names in
// the table's order, and every field's value reads back (so the writer takes
// every field through the table).
func TestFieldTableIsSnapshotLayout(t *testing.T) {
	sw, err := newSnapshotWriter(t.TempDir(), 16, "k-fixed")
	if err != nil {
		t.Fatal(err)
	}
	defer sw.Remove()
	specs := schema.FieldSpecs()
	var ev schema.Event
	for _, f := range specs {
		ev.SetValue(f.Name, "v-"+string(f.Name))
	}
	ev.Type = schema.Complete
	ev.OccurredAt = time.Date(2025, 11, 3, 9, 15, 0, 250000000, time.UTC)
	if err := sw.Write(&ev); err != nil {
		t.Fatal(err)
	}
	if _, _, err := sw.Finish(); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(sw.f.Name())
	if err != nil {
		t.Fatal(err)
	}
	pf, err := file.OpenParquetFile(sw.f.Name(), false)
	if err != nil {
		t.Fatalf("arrow cannot open the snapshot: %v", err)
	}
	defer pf.Close()
	sch := pf.MetaData().Schema
	if sch.NumColumns() != len(specs) {
		t.Fatalf("the snapshot has %d columns, the field table %d", sch.NumColumns(), len(specs))
	}
	for i, f := range specs {
		if got := sch.Column(i).Name(); got != string(f.Name) {
			t.Errorf("column %d is %q, the field table's entry %d is %q", i, got, i, f.Name)
		}
	}
	var got []schema.Event
	err = ReadSnapshot(bytes.NewReader(b), int64(len(b)), func(e *schema.Event) error {
		c := *e
		c.CloneStrings()
		got = append(got, c)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 1 {
		t.Fatalf("%d events read back", len(got))
	}
	for _, f := range specs {
		if g, w := got[0].Value(f.Name), ev.Value(f.Name); g != w {
			t.Errorf("%s: read back %q, wrote %q", f.Name, g, w)
		}
	}
}
