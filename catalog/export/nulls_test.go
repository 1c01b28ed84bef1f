package export

import (
	"bytes"
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema"
)

// nullPatterns gives, per optional column, which of n rows (in time order)
// leave it empty: runs of random lengths, strict alternation, k empties then
// k values (k = 1..8), a whole row group of 500 rows, every row, no row,
// and, in each block of 64 rows, y empties, y values and empties to the
// end of the block (y = 1..31): the shape that parquet-go v0.32.0's writer
// of Go structs turns into empty strings when a batch holds it.
func nullPatterns(n int) map[schema.Field]func(i int) bool {
	r := rand.New(rand.NewPCG(7, 7))
	runs := make([]bool, n)
	for i, empty := 0, false; i < n; empty = !empty {
		l := 1 + r.IntN(40)
		for j := i; j < min(i+l, n); j++ {
			runs[j] = empty
		}
		i += l
	}
	var kk []bool
	for k := 1; len(kk) < n; k = k%8 + 1 {
		for range k {
			kk = append(kk, true)
		}
		for range k {
			kk = append(kk, false)
		}
	}
	return map[schema.Field]func(int) bool{
		schema.FieldSubjectID:  func(i int) bool { return runs[i] },
		schema.FieldResourceID: func(i int) bool { return i%2 == 1 },
		schema.FieldActivity: func(i int) bool {
			y := 1 + (i/64)%31
			return i%64 < y || i%64 >= 2*y
		},
		schema.FieldQueue:    func(i int) bool { return i >= 1000 && i < 1500 },
		schema.FieldPriority: func(i int) bool { return true },
		schema.FieldChannel:  func(i int) bool { return false },
		schema.FieldOutcome:  func(i int) bool { return kk[i] },
		schema.FieldEventID:  func(i int) bool { return false },
		// Activity instances named on some rows only, in runs of 3.
		schema.FieldInstanceID: func(i int) bool { return (i/3)%2 == 0 },
	}
}

// TestNullsWhereTheSourceWasEmpty ingests events whose optional fields are
// empty in every pattern above, then reads the snapshot file and a whole
// export with Apache Arrow's Go reader: each optional column must be NULL
// exactly on the rows where the source was empty (never an empty string),
// and its null count, in the column chunk statistics and in the data, must
// be the source's.
func TestNullsWhereTheSourceWasEmpty(t *testing.T) {
	const n = 2600
	e, v, empty, want := nullsFixture(t, n)
	r, err := e.s.Blobs().Open(context.Background(), v.Manifest.Files[0].SHA256)
	if err != nil {
		t.Fatal(err)
	}
	snap, _ := io.ReadAll(r)
	r.Close()
	var exp bytes.Buffer
	if _, err := WriteParquet(context.Background(), &exp, Source{Open: e.opener(), TempDir: e.tmp}, v.Manifest.Files, Filter{}, ParquetOptions{RowGroupRows: 500}); err != nil {
		t.Fatal(err)
	}
	for name, data := range map[string][]byte{"snapshot": snap, "export": exp.Bytes()} {
		t.Run(name, func(t *testing.T) { checkNulls(t, data, n, empty, want) })
	}
}

func checkNulls(t *testing.T, data []byte, n int, empty map[string]map[schema.Field]bool, want map[schema.Field]int64) {
	pf, err := file.NewParquetReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	md := pf.MetaData()
	if md.NumRows != int64(n) || md.NumRowGroups() < 5 {
		t.Fatalf("%d rows in %d row groups", md.NumRows, md.NumRowGroups())
	}
	sch := md.Schema
	for f := range want {
		ci := sch.ColumnIndexByName(string(f))
		var stat int64
		for g := 0; g < md.NumRowGroups(); g++ {
			cc, err := md.RowGroup(g).ColumnChunk(ci)
			if err != nil {
				t.Fatal(err)
			}
			st, err := cc.Statistics()
			if err != nil || st == nil || !st.HasNullCount() {
				t.Fatalf("%s: row group %d has no null count (%v)", f, g, err)
			}
			stat += st.NullCount()
		}
		if stat != want[f] {
			t.Errorf("%s: statistics count %d nulls, the source %d empty", f, stat, want[f])
		}
	}
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	var ids []string
	for _, ch := range tbl.Column(sch.ColumnIndexByName("event_id")).Data().Chunks() {
		a := ch.(*array.String)
		for i := 0; i < a.Len(); i++ {
			ids = append(ids, a.Value(i))
		}
	}
	for f := range want {
		row := 0
		var nulls int64
		for _, ch := range tbl.Column(sch.ColumnIndexByName(string(f))).Data().Chunks() {
			a := ch.(*array.String)
			nulls += int64(a.NullN())
			for i := 0; i < a.Len(); i++ {
				id := ids[row]
				switch {
				case empty[id][f] && !a.IsNull(i):
					t.Fatalf("%s of %s: %q where the source was empty", f, id, a.Value(i))
				case !empty[id][f] && a.IsNull(i):
					t.Fatalf("%s of %s: NULL where the source had a value", f, id)
				case !empty[id][f] && a.Value(i) == "":
					t.Fatalf("%s of %s: an empty string", f, id)
				}
				row++
			}
		}
		if nulls != want[f] {
			t.Errorf("%s: arrow counts %d nulls, the source %d empty", f, nulls, want[f])
		}
	}
}

// nullsFixture ingests n events whose optional fields are empty in the
// patterns of nullPatterns, as one file of row groups of 500 rows. It
// returns, per event_id, the fields left empty, and per field the count.
// nullsHeader is the fixture's header: every schema field.
var nullsHeader = append(slices.Clone(header), string(schema.FieldInstanceID))

func nullsFixture(t *testing.T, n int) (*env, *catalog.Version, map[string]map[schema.Field]bool, map[schema.Field]int64) {
	t.Helper()
	pats := nullPatterns(n)
	rows := make([][]string, n)
	empty := map[string]map[schema.Field]bool{}
	want := map[schema.Field]int64{}
	for i := range rows {
		id := fmt.Sprintf("ev-%05d", i)
		row := []string{"north", fmt.Sprintf("C-%d", i/5), "P-1", "R-1", "arrival", "triage", "q1",
			genBase.Add(time.Duration(i) * time.Minute).Format(time.RFC3339), "2", "phone", "seen", id, fmt.Sprintf("I-%d", i)}
		empty[id] = map[schema.Field]bool{}
		for j, h := range nullsHeader {
			if p := pats[schema.Field(h)]; p != nil && p(i) {
				row[j] = ""
				empty[id][schema.Field(h)] = true
				want[schema.Field(h)]++
			}
		}
		rows[i] = row
	}
	e := newEnv(t, 500)
	e.dataset(t, "er", "nulls")
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	w.Write(nullsHeader)
	w.WriteAll(rows)
	v := e.ingest(t, "er", "nulls", buf.Bytes(), "nulls.csv")
	if len(v.Manifest.Files) != 1 {
		t.Fatalf("%d files", len(v.Manifest.Files))
	}
	return e, v, empty, want
}

// TestInstanceIDExported: the whole CSV export carries instance_id as its
// last column, a pseudonym where the source named an instance, empty
// where it did not, as the snapshot holds it (read by the catalog's own
// reader).
func TestInstanceIDExported(t *testing.T) {
	const n = 300
	e, v, empty, _ := nullsFixture(t, n)
	var out bytes.Buffer
	if _, err := WriteCSV(context.Background(), &out, Source{Open: e.opener(), TempDir: e.tmp}, v.Manifest.Files, Filter{}); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(&out).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	head := recs[0]
	if len(head) != len(schema.Fields) || head[len(head)-1] != string(schema.FieldInstanceID) {
		t.Fatalf("header %q", head)
	}
	col := slices.Index(head, string(schema.FieldEventID))
	stored := map[string]string{}
	for _, ev := range e.allEvents(t, v.Manifest.Files) {
		stored[ev.EventID] = ev.InstanceID
	}
	named := 0
	for _, r := range recs[1:] {
		id, inst := r[col], r[len(r)-1]
		if inst != stored[id] || (inst == "") != empty[id][schema.FieldInstanceID] || inst != "" && !anonymize.IsPseudonym(inst) {
			t.Fatalf("event %s: instance_id %q, stored %q, empty in the source %v", id, inst, stored[id], empty[id][schema.FieldInstanceID])
		}
		if inst != "" {
			named++
		}
	}
	if len(recs) != n+1 || named == 0 || named == n {
		t.Errorf("%d records, %d with an instance", len(recs)-1, named)
	}
}
