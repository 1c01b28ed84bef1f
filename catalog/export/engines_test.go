package export

import (
	"bytes"
	"context"
	"encoding/json"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	aparquet "github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema"
)

// readout is what one reader makes of a Parquet file.
type readout struct {
	Rows    int64 `json:"rows"`
	Columns []struct {
		Name  string `json:"name"`
		Type  string `json:"type"`
		Nulls int64  `json:"nulls"`
	} `json:"columns"`
}

// arrowReadout reads data with Apache Arrow's Go reader; types are given
// in DuckDB's names for the two Arrow types flowcat's files map to.
func arrowReadout(t *testing.T, data []byte) readout {
	t.Helper()
	pf, err := file.NewParquetReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	out := readout{Rows: tbl.NumRows()}
	for i := range int(tbl.NumCols()) {
		col := tbl.Column(i)
		var nulls int64
		for _, ch := range col.Data().Chunks() {
			nulls += int64(ch.NullN())
		}
		typ := col.DataType().String()
		switch dt := col.DataType().(type) {
		case *arrow.StringType:
			typ = "VARCHAR"
		case *arrow.TimestampType:
			if dt.Unit == arrow.Microsecond && dt.TimeZone == "UTC" {
				typ = "TIMESTAMP WITH TIME ZONE"
			}
		case *arrow.Int64Type:
			typ = "BIGINT"
		case *arrow.Int32Type:
			typ = "INTEGER"
		case *arrow.Date32Type:
			typ = "DATE"
		case *arrow.Float64Type:
			typ = "DOUBLE"
		}
		out.Columns = append(out.Columns, struct {
			Name  string `json:"name"`
			Type  string `json:"type"`
			Nulls int64  `json:"nulls"`
		}{col.Name(), typ, nulls})
	}
	return out
}

// checkEngineFriendly checks the file's layout: only PLAIN, RLE and
// dictionary encodings (which every mainstream reader decodes: the
// encodings of the Apache Parquet format's Encodings.md that readers have
// had longest, common practice), and occurred_at, when present, as every
// row group's ascending sorting column.
func checkEngineFriendly(t *testing.T, data []byte) {
	t.Helper()
	pf, err := file.NewParquetReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	md := pf.MetaData()
	ts := md.Schema.ColumnIndexByName(string(schema.FieldOccurredAt))
	ok := []aparquet.Encoding{aparquet.Encodings.Plain, aparquet.Encodings.RLE, aparquet.Encodings.RLEDict, aparquet.Encodings.PlainDict}
	for g := 0; g < md.NumRowGroups(); g++ {
		rg := md.RowGroup(g)
		for c := 0; c < md.Schema.NumColumns(); c++ {
			cc, err := rg.ColumnChunk(c)
			if err != nil {
				t.Fatal(err)
			}
			for _, enc := range cc.Encodings() {
				if !slices.Contains(ok, enc) {
					t.Errorf("row group %d: %s uses %v", g, md.Schema.Column(c).Name(), enc)
				}
			}
		}
		sc := rg.SortingColumns()
		if ts < 0 {
			if len(sc) != 0 {
				t.Errorf("row group %d: sorting columns %v without occurred_at", g, sc)
			}
		} else if len(sc) != 1 || sc[0].ColumnIdx != int32(ts) || sc[0].Descending {
			t.Errorf("row group %d: sorting columns %+v, want occurred_at ascending", g, sc)
		}
	}
}

// TestEveryEngineReadsTheFiles writes every kind of Parquet file flowcat
// writes (a snapshot, its version's case table, a whole export, a filtered
// export of some columns,
// and a snapshot of the first release, which old data directories still
// serve) and checks that Apache Arrow's Go reader and DuckDB (through
// @duckdb/node-api, installed by .ci/run into testdata/duckdb) read the same
// rows, null counts and types, and that the null counts are the source's.
func TestEveryEngineReadsTheFiles(t *testing.T) {
	const n = 2600
	e, v, _, want := nullsFixture(t, n)
	ctx := context.Background()
	src := Source{Open: e.opener(), TempDir: e.tmp}
	dir := t.TempDir()
	files := map[string][]byte{}
	r, err := e.s.Blobs().Open(ctx, v.Manifest.Files[0].SHA256)
	if err != nil {
		t.Fatal(err)
	}
	files["snapshot"], _ = io.ReadAll(r)
	r.Close()
	if v.Manifest.CaseTable == nil {
		t.Fatal("no case table")
	}
	r, err = e.s.Blobs().Open(ctx, v.Manifest.CaseTable.SHA256)
	if err != nil {
		t.Fatal(err)
	}
	files["case-table"], _ = io.ReadAll(r)
	r.Close()
	var whole, part bytes.Buffer
	if _, err := WriteParquet(ctx, &whole, src, v.Manifest.Files, Filter{}, ParquetOptions{RowGroupRows: 700}); err != nil {
		t.Fatal(err)
	}
	files["export"] = whole.Bytes()
	f := Filter{From: genBase.Add(300 * time.Minute), Sites: []string{"north"}, Columns: []schema.Field{schema.FieldCaseID, schema.FieldActivity, schema.FieldQueue}}
	if _, err := WriteParquet(ctx, &part, src, v.Manifest.Files, f, ParquetOptions{RowGroupRows: 700, Metadata: map[string]string{"flowcat.dataset": "er/nulls"}}); err != nil {
		t.Fatal(err)
	}
	files["filtered-export"] = part.Bytes()
	old, err := os.ReadFile("../../testdata/golden/release-8a7be85/data/blobs/sha256/37/371d8766319e31b554c3edc10c75a54caeae8e3c309768df3df186d88e3204fd")
	if err != nil {
		t.Fatal(err)
	}

	// The filtered export says what it holds.
	pf, err := file.NewParquetReader(bytes.NewReader(files["filtered-export"]))
	if err != nil {
		t.Fatal(err)
	}
	kv := pf.MetaData().KeyValueMetadata()
	// Keys sorted, as url.Values.Encode writes them (RFC 3986 escapes).
	wantFilter := "columns=case_id%2Cactivity%2Cqueue&from=2026-03-02T05%3A00%3A00Z&site=north"
	if got := kv.FindValue(MetaFilter); got == nil || *got != wantFilter {
		t.Errorf("flowcat.filter = %v, want %q", got, wantFilter)
	}
	if got := kv.FindValue("flowcat.dataset"); got == nil || *got != "er/nulls" {
		t.Errorf("flowcat.dataset = %v", got)
	}
	for _, data := range files {
		checkEngineFriendly(t, data)
	}

	paths := map[string]string{"release-8a7be85-snapshot": filepath.Join(dir, "old.parquet")}
	if err := os.WriteFile(paths["release-8a7be85-snapshot"], old, 0o644); err != nil {
		t.Fatal(err)
	}
	arrow := map[string]readout{"release-8a7be85-snapshot": arrowReadout(t, old)}
	for name, data := range files {
		paths[name] = filepath.Join(dir, name+".parquet")
		if err := os.WriteFile(paths[name], data, 0o644); err != nil {
			t.Fatal(err)
		}
		arrow[name] = arrowReadout(t, data)
	}
	for _, name := range []string{"snapshot", "export"} {
		a := arrow[name]
		if a.Rows != n {
			t.Errorf("%s: %d rows, want %d", name, a.Rows, n)
		}
		for _, c := range a.Columns {
			if c.Nulls != want[schema.Field(c.Name)] {
				t.Errorf("%s: %s has %d nulls, the source %d empty", name, c.Name, c.Nulls, want[schema.Field(c.Name)])
			}
		}
	}

	duck := duckdbReadouts(t, paths)
	if duck == nil {
		return
	}
	if len(duck) != len(paths) {
		t.Fatalf("DuckDB read %d files of %d", len(duck), len(paths))
	}
	for name, p := range paths {
		a, d := arrow[name], duck[p]
		ab, _ := json.Marshal(a)
		db, _ := json.Marshal(d)
		if !bytes.Equal(ab, db) {
			t.Errorf("%s: Arrow and DuckDB read differently:\narrow  %s\nduckdb %s", name, ab, db)
		}
	}
}

// duckdbReadouts runs testdata/duckdb/read.mjs over paths. Without Node.js
// or the installed package it skips the DuckDB half of the test, except in
// CI (CI set), where .ci/run installs both and their absence fails.
func duckdbReadouts(t *testing.T, paths map[string]string) map[string]readout {
	t.Helper()
	dir, _ := filepath.Abs("testdata/duckdb")
	_, errMod := os.Stat(filepath.Join(dir, "node_modules", "@duckdb", "node-api"))
	node, errNode := exec.LookPath("node")
	if errMod != nil || errNode != nil {
		msg := "DuckDB check not run: needs node and `npm ci --prefix catalog/export/testdata/duckdb`"
		if os.Getenv("CI") != "" {
			t.Fatal(msg)
		}
		t.Log(msg)
		return nil
	}
	args := []string{filepath.Join(dir, "read.mjs")}
	for _, p := range paths {
		args = append(args, p)
	}
	cmd := exec.Command(node, args...)
	cmd.Dir = dir
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	outb, err := cmd.Output()
	if err != nil {
		t.Fatalf("duckdb: %v\n%s", err, stderr.Bytes())
	}
	var out map[string]readout
	if err := json.Unmarshal(outb, &out); err != nil {
		t.Fatalf("duckdb output: %v\n%s", err, outb)
	}
	return out
}
