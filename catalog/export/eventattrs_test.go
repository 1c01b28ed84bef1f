package export

import (
	"archive/zip"
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema"
)

// An invented ferry-terminal help desk: each step of a contact records
// the caller's age as typed at that step, the postal code of the ticket
// office, the day, the counter number and an urgency code.
const attrExportProfile = `fields:
  site: site
  case_id: contact
  event_type: step
  occurred_at: at
attributes:
  caller_age: {column: AGE, role: sensitive, type: age, band: 5, level: event}
  office: {column: POSTAL, role: plain, type: code, keep: 2, level: event}
  day_of: {column: DAY, role: plain, type: date, period: month, level: event}
  counter: {column: COUNTER, role: plain, type: integer, level: event}
  urgency: {column: URG, role: plain, type: code, level: event}
`

// attrExportRaw: contact, site, step, minute from base, AGE, POSTAL, DAY,
// COUNTER, URG. Minutes are distinct: they key the rows.
var attrExportRaw = [][]string{
	{"k1", "quay", "arrival", "0", "91", "80331-12", "2026-04-17", "4", "U1"},
	{"k1", "quay", "departure", "31", "36.9", "80331-12", "2026-05-02", "", "U1"},
	{"k2", "pier", "arrival", "5", "", "", "", "-7", ""},
	{"k3", "quay", "arrival", "62", "4", "1010", "2026-12-31", "0", "=SUM(A1)"},
	{"k3", "quay", "departure", "64", "120", "1010", "2027-01-01", "11", "U3"},
}

// wantExportAttrs computes a raw row's exported values with the standard
// library from the rules the README states: 5-year age bands, 90 and over
// "90+" (45 CFR 164.514(b)(2)(i)(C)); the first 2 characters of the postal
// code; the first of the date's month; integers in decimal.
func wantExportAttrs(r []string) []string {
	age := ""
	if r[4] != "" {
		f, _ := strconv.ParseFloat(r[4], 64)
		a := int(f)
		if a >= 90 {
			age = "90+"
		} else {
			age = fmt.Sprintf("%02d-%02d", a/5*5, a/5*5+4)
		}
	}
	office := ""
	if r[5] != "" {
		office = r[5][:2]
	}
	day := ""
	if r[6] != "" {
		day = r[6][:8] + "01"
	}
	// Column order: the profile's, by name.
	return []string{age, r[7], day, office, r[8]}
}

var attrExportNames = []string{"caller_age", "counter", "day_of", "office", "urgency"}

func attrExportFixture(t *testing.T) (*env, *catalog.Version, map[string][]string) {
	t.Helper()
	e := newEnv(t, 2)
	ctx := context.Background()
	if _, err := e.s.CreateProject(ctx, "p", "", "curator"); err != nil {
		t.Fatal(err)
	}
	if _, err := e.s.CreateDataset(ctx, catalog.DatasetSpec{Project: "p", Name: "d", Title: "Help desk", Profile: []byte(attrExportProfile)}, "curator"); err != nil {
		t.Fatal(err)
	}
	base := time.Date(2026, 5, 4, 9, 0, 0, 0, time.UTC)
	want := map[string][]string{} // occurred_at as exported -> values
	var v *catalog.Version
	// Three uploads: three files, merged by the export.
	for _, part := range [][][]string{attrExportRaw[:2], attrExportRaw[2:3], attrExportRaw[3:]} {
		var b strings.Builder
		b.WriteString("contact,site,step,at,AGE,POSTAL,DAY,COUNTER,URG\n")
		for _, r := range part {
			m, _ := strconv.Atoi(r[3])
			at := base.Add(time.Duration(m) * time.Minute)
			fmt.Fprintf(&b, "%s,%s,%s,%s,%s,%s,%s,%s,%s\n", r[0], r[1], r[2], at.Format(time.RFC3339), r[4], r[5], r[6], r[7], r[8])
			want[at.Format("2006-01-02T15:04:05.000000Z")] = wantExportAttrs(r)
		}
		v = e.ingest(t, "p", "d", []byte(b.String()), fmt.Sprintf("desk-%d.csv", len(want)))
	}
	if len(v.Manifest.Files) != 3 {
		t.Fatalf("%d files", len(v.Manifest.Files))
	}
	return e, v, want
}

// arrowAttrs reads a Parquet file with arrow-go: its column names and, per
// row, occurred_at (as exported to CSV) with the attribute values as text;
// types are checked against the snapshots' (string, INT64, DATE32).
func arrowAttrs(t *testing.T, data []byte) ([]string, map[string][]string) {
	t.Helper()
	pf, err := file.NewParquetReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	var names []string
	for _, f := range tbl.Schema().Fields() {
		names = append(names, f.Name)
	}
	types := map[string]arrow.Type{"caller_age": arrow.STRING, "counter": arrow.INT64, "day_of": arrow.DATE32, "office": arrow.STRING, "urgency": arrow.STRING}
	rows := map[string][]string{}
	n := int(tbl.NumRows())
	ats := make([]string, n)
	vals := make([][]string, n)
	for c, name := range names {
		row := 0
		for _, ch := range tbl.Column(c).Data().Chunks() {
			if tp, ok := types[name]; ok && ch.DataType().ID() != tp {
				t.Errorf("%s is %s, want %s", name, ch.DataType(), tp)
			}
			for i := range ch.Len() {
				v := ""
				if ch.IsValid(i) {
					switch a := ch.(type) {
					case *array.String:
						v = a.Value(i)
					case *array.Int64:
						v = strconv.FormatInt(a.Value(i), 10)
					case *array.Date32:
						v = a.Value(i).ToTime().Format(time.DateOnly)
					case *array.Timestamp:
						v = time.UnixMicro(int64(a.Value(i))).UTC().Format("2006-01-02T15:04:05.000000Z")
					}
				}
				if name == "occurred_at" {
					ats[row] = v
				} else if _, ok := types[name]; ok {
					vals[row] = append(vals[row], v)
				}
				row++
			}
		}
	}
	for i := range ats {
		rows[ats[i]] = vals[i]
	}
	return names, rows
}

// Every export of every column carries the event attributes after the
// schema's columns, typed, equal to a standard-library computation from
// the raw rows; an export that names its columns carries none.
func TestExportEventAttributes(t *testing.T) {
	e, v, want := attrExportFixture(t)
	ctx := context.Background()
	defer func(n int) { maxOpen = n }(maxOpen)
	src := Source{Open: e.opener(), TempDir: e.tmp}
	for _, staged := range []bool{false, true} {
		maxOpen = MaxOpenFiles
		if staged {
			maxOpen = 2 // a staged merge through temporary files
		}
		// CSV.
		var buf bytes.Buffer
		if _, err := WriteCSV(ctx, &buf, src, v.Manifest.Files, Filter{}); err != nil {
			t.Fatal(err)
		}
		recs, err := csv.NewReader(&buf).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		if got := strings.Join(recs[0][len(schema.Fields):], ","); got != strings.Join(attrExportNames, ",") {
			t.Fatalf("csv header %v", recs[0])
		}
		for _, r := range recs[1:] {
			// A value a spreadsheet takes for a formula gets a quote in
			// front, as every CSV field does (OWASP's CSV-injection rule);
			// an integer (the counter's -7) is a number to it, and stays.
			w := append([]string(nil), want[r[7]]...)
			for i, x := range w {
				if _, err := strconv.ParseInt(x, 10, 64); err != nil && x != "" && strings.ContainsRune("=+-@", rune(x[0])) {
					w[i] = "'" + x
				}
			}
			if got := r[len(schema.Fields):]; strings.Join(got, "|") != strings.Join(w, "|") {
				t.Errorf("staged %t: csv row at %s: %v, want %v", staged, r[7], got, w)
			}
		}
		if len(recs) != len(attrExportRaw)+1 {
			t.Errorf("csv: %d records", len(recs))
		}
		// Parquet.
		buf.Reset()
		if _, err := WriteParquet(ctx, &buf, src, v.Manifest.Files, Filter{}, ParquetOptions{}); err != nil {
			t.Fatal(err)
		}
		names, rows := arrowAttrs(t, buf.Bytes())
		if strings.Join(names[len(schema.Fields):], ",") != strings.Join(attrExportNames, ",") {
			t.Errorf("parquet columns %v", names)
		}
		for at, w := range want {
			if strings.Join(rows[at], "|") != strings.Join(w, "|") {
				t.Errorf("staged %t: parquet row at %s: %v, want %v", staged, at, rows[at], w)
			}
		}
	}
	maxOpen = MaxOpenFiles

	// Columns named: schema fields only.
	var buf bytes.Buffer
	if _, err := WriteCSV(ctx, &buf, src, v.Manifest.Files, Filter{Columns: []schema.Field{schema.FieldCaseID, schema.FieldOccurredAt}}); err != nil {
		t.Fatal(err)
	}
	if first, _, _ := strings.Cut(buf.String(), "\r\n"); first != "case_id,occurred_at" {
		t.Errorf("header %q", first)
	}

	// XES: typed attributes, nulls left out.
	buf.Reset()
	if _, err := WriteXES(ctx, &buf, src, v.Manifest.Files, Filter{}, XESOptions{Dataset: "p/d", Version: v.Number}); err != nil {
		t.Fatal(err)
	}
	x := buf.String()
	for _, s := range []string{
		`<string key="caller_age" value="90+"/>`,
		`<int key="counter" value="-7"/>`,
		`<date key="day_of" value="2026-04-01T00:00:00.000000Z"/>`,
		`<string key="office" value="80"/>`,
		`<date key="day_of" value="2027-01-01T00:00:00.000000Z"/>`,
	} {
		if !strings.Contains(x, s) {
			t.Errorf("the XES log lacks %s", s)
		}
	}
	if n := strings.Count(x, `key="caller_age"`); n != 4 { // k2's is null
		t.Errorf("%d caller_age attributes, want 4", n)
	}

	// The Hive layout: every partition file carries them.
	dir := filepath.Join(t.TempDir(), "layout")
	files, err := WriteLayout(ctx, src, v.Manifest.Files, dir, LayoutOptions{})
	if err != nil {
		t.Fatal(err)
	}
	got := map[string][]string{}
	for _, f := range files {
		b, err := os.ReadFile(filepath.Join(dir, filepath.FromSlash(f.Path)))
		if err != nil {
			t.Fatal(err)
		}
		names, rows := arrowAttrs(t, b)
		if strings.Join(names[len(LayoutColumns):], ",") != strings.Join(attrExportNames, ",") {
			t.Errorf("%s: columns %v", f.Path, names)
		}
		for at, vals := range rows {
			got[at] = vals
		}
	}
	for at, w := range want {
		if strings.Join(got[at], "|") != strings.Join(w, "|") {
			t.Errorf("layout row at %s: %v, want %v", at, got[at], w)
		}
	}

	// A bundle carries the files as stored, columns and all, and its
	// dictionary names them with their roles.
	ds, err := e.s.Dataset(ctx, "p", "d")
	if err != nil {
		t.Fatal(err)
	}
	mb, err := e.s.ManifestBytes(ctx, v)
	if err != nil {
		t.Fatal(err)
	}
	buf.Reset()
	if err := WriteBundle(ctx, &buf, "zip", Bundle{Dataset: ds, Version: v, Manifest: mb, Open: e.opener(), Citation: CitationInput{Authors: []Author{{Name: "Harbour Desk Study"}}}}); err != nil {
		t.Fatal(err)
	}
	zr, err := zip.NewReader(bytes.NewReader(buf.Bytes()), int64(buf.Len()))
	if err != nil {
		t.Fatal(err)
	}
	got = map[string][]string{}
	for _, zf := range zr.File {
		rc, err := zf.Open()
		if err != nil {
			t.Fatal(err)
		}
		b, err := io.ReadAll(rc)
		rc.Close()
		if err != nil {
			t.Fatal(err)
		}
		switch {
		case zf.Name == BundleDictionary:
			if !strings.Contains(string(b), "| `caller_age` | string (UTF-8) | sensitive | age in 5-year bands, 90 and over as one group (90+) |") {
				t.Errorf("the bundle's dictionary lacks the event attributes:\n%s", b)
			}
		case strings.HasPrefix(zf.Name, "data/"):
			_, rows := arrowAttrs(t, b)
			for at, vals := range rows {
				got[at] = vals
			}
		}
	}
	for at, w := range want {
		if strings.Join(got[at], "|") != strings.Join(w, "|") {
			t.Errorf("bundle row at %s: %v, want %v", at, got[at], w)
		}
	}
}

// A snapshot file with event attributes and a whole export of them read
// the same in Apache Arrow's Go reader and DuckDB (when installed, see
// duckdbReadouts): rows, column types (VARCHAR, BIGINT, DATE) and null
// counts, which are the raw file's empty values.
func TestEnginesReadEventAttributes(t *testing.T) {
	e, v, _ := attrExportFixture(t)
	ctx := context.Background()
	src := Source{Open: e.opener(), TempDir: e.tmp}
	files := map[string][]byte{}
	r, err := e.s.Blobs().Open(ctx, v.Manifest.Files[0].SHA256)
	if err != nil {
		t.Fatal(err)
	}
	files["snapshot"], _ = io.ReadAll(r)
	r.Close()
	var whole bytes.Buffer
	if _, err := WriteParquet(ctx, &whole, src, v.Manifest.Files, Filter{}, ParquetOptions{}); err != nil {
		t.Fatal(err)
	}
	files["export"] = whole.Bytes()
	// Null counts of the whole export: the raw rows' empty values.
	wantNulls := map[string]int64{}
	for _, raw := range attrExportRaw {
		for i, name := range attrExportNames {
			if wantExportAttrs(raw)[i] == "" {
				wantNulls[name]++
			}
		}
	}
	types := map[string]string{"caller_age": "VARCHAR", "counter": "BIGINT", "day_of": "DATE", "office": "VARCHAR", "urgency": "VARCHAR"}
	dir := t.TempDir()
	paths := map[string]string{}
	arrowOut := map[string]readout{}
	for name, data := range files {
		checkEngineFriendly(t, data)
		paths[name] = filepath.Join(dir, name+".parquet")
		if err := os.WriteFile(paths[name], data, 0o644); err != nil {
			t.Fatal(err)
		}
		arrowOut[name] = arrowReadout(t, data)
		seen := 0
		for _, c := range arrowOut[name].Columns {
			if tp, ok := types[c.Name]; ok {
				seen++
				if c.Type != tp {
					t.Errorf("%s: %s is %s, want %s", name, c.Name, c.Type, tp)
				}
				if name == "export" && c.Nulls != wantNulls[c.Name] {
					t.Errorf("export: %s has %d nulls, want %d", c.Name, c.Nulls, wantNulls[c.Name])
				}
			}
		}
		if seen != len(types) {
			t.Errorf("%s: %d attribute columns", name, seen)
		}
	}
	duck := duckdbReadouts(t, paths)
	if duck == nil {
		return
	}
	for name, p := range paths {
		ab, _ := json.Marshal(arrowOut[name])
		db, _ := json.Marshal(duck[p])
		if !bytes.Equal(ab, db) {
			t.Errorf("%s: Arrow and DuckDB read differently:\narrow  %s\nduckdb %s", name, ab, db)
		}
	}
}
