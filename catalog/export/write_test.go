package export

import (
	"bufio"
	"bytes"
	"context"
	"encoding/csv"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	aparquet "github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/file"
	pqschema "github.com/apache/arrow-go/v18/parquet/schema"

	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema"
)

func TestWriteParquetReadByArrow(t *testing.T) {
	e, vs := fixture(t, 100)
	files := vs[2].Manifest.Files
	all := e.allEvents(t, files)
	for _, tc := range []struct {
		name string
		f    Filter
	}{
		{"whole version", Filter{}},
		{"filtered subset", Filter{From: genBase.Add(10 * time.Hour), Sites: []string{"south", "north"}, Columns: []schema.Field{"occurred_at", "event_type", "site", "activity", "case_id"}}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			want := sorted(all, tc.f)
			var out [2]bytes.Buffer
			for i := range out {
				st, err := WriteParquet(context.Background(), &out[i], Source{Open: e.opener(), TempDir: e.tmp}, files, tc.f, ParquetOptions{RowGroupRows: 500})
				if err != nil {
					t.Fatal(err)
				}
				if st.RowsEmitted != int64(len(want)) {
					t.Fatalf("emitted %d, want %d", st.RowsEmitted, len(want))
				}
			}
			if !bytes.Equal(out[0].Bytes(), out[1].Bytes()) {
				t.Fatal("two writes of the same request differ")
			}
			data := out[0].Bytes()
			if bytes.Contains(data, []byte("parquet-go")) {
				t.Error("the file names the library (created_by)")
			}
			pf, err := file.NewParquetReader(bytes.NewReader(data))
			if err != nil {
				t.Fatalf("arrow cannot open the export: %v", err)
			}
			md := pf.MetaData()
			if md.GetCreatedBy() != CreatedBy {
				t.Errorf("created_by %q, want %q", md.GetCreatedBy(), CreatedBy)
			}
			if md.NumRows != int64(len(want)) {
				t.Fatalf("arrow counts %d rows, want %d", md.NumRows, len(want))
			}
			if wantRG := (len(want) + 499) / 500; md.NumRowGroups() != wantRG {
				t.Errorf("%d row groups, want %d of at most 500 rows", md.NumRowGroups(), wantRG)
			}
			cols := tc.f.columns()
			sch := md.Schema
			if sch.NumColumns() != len(cols) {
				t.Fatalf("%d columns, want %d", sch.NumColumns(), len(cols))
			}
			for i, c := range cols {
				col := sch.Column(i)
				if col.Name() != string(c) {
					t.Errorf("column %d is %s, want %s (schema order)", i, col.Name(), c)
				}
				// Logical types as in the Apache Parquet format spec, LogicalTypes.md.
				switch lt := col.LogicalType().(type) {
				case pqschema.TimestampLogicalType:
					if c != schema.FieldOccurredAt || lt.TimeUnit() != pqschema.TimeUnitMicros || !lt.IsAdjustedToUTC() {
						t.Errorf("%s: logical type %v", c, lt)
					}
				case pqschema.StringLogicalType:
					if c == schema.FieldOccurredAt {
						t.Errorf("occurred_at is a string")
					}
				default:
					t.Errorf("%s: logical type %v", c, lt)
				}
				if c.Required() != (col.SchemaNode().RepetitionType() == aparquet.Repetitions.Required) {
					t.Errorf("%s: repetition %v", c, col.SchemaNode().RepetitionType())
				}
			}
			for g := 0; g < md.NumRowGroups(); g++ {
				for _, name := range []string{"site", "event_type"} {
					cc, err := md.RowGroup(g).ColumnChunk(sch.ColumnIndexByName(name))
					if err != nil {
						t.Fatal(err)
					}
					if !cc.HasDictionaryPage() {
						t.Errorf("row group %d: %s has no dictionary", g, name)
					}
					if cc.Compression() != 6 { // ZSTD = 6 in parquet.thrift CompressionCodec
						t.Errorf("row group %d: %s codec %v", g, name, cc.Compression())
					}
				}
			}
			tbl := arrowtest.Table(t, pf)
			defer tbl.Release()
			for ci, c := range cols {
				chunks := tbl.Column(ci).Data().Chunks()
				row := 0
				for _, ch := range chunks {
					for i := 0; i < ch.Len(); i++ {
						var got string
						switch a := ch.(type) {
						case *array.Timestamp:
							if tt := a.DataType().(*arrow.TimestampType); tt.Unit != arrow.Microsecond || tt.TimeZone != "UTC" {
								t.Fatalf("arrow type %v", tt)
							}
							got = time.UnixMicro(int64(a.Value(i))).UTC().Format("2006-01-02T15:04:05.000000Z")
						case *array.String:
							if !a.IsNull(i) {
								got = a.Value(i)
							}
						default:
							t.Fatalf("%s: arrow array %T", c, ch)
						}
						if w := want[row].Value(c); got != w {
							t.Fatalf("row %d %s = %q, want %q", row, c, got, w)
						}
						row++
					}
				}
				if row != len(want) {
					t.Fatalf("%s: %d values", c, row)
				}
			}
		})
	}
}

func TestWriteRecordRFC4180(t *testing.T) {
	// RFC 4180 section 2: rule 6 (fields with line breaks, double quotes
	// and commas are enclosed in double quotes), rule 7 (an inner double
	// quote is escaped by a preceding double quote), rule 2 (each record
	// ends with CRLF).
	for _, tc := range []struct {
		in   []string
		want string
	}{
		{[]string{"a", "b"}, "a,b\r\n"},
		{[]string{"x-ray, chest", "plain"}, "\"x-ray, chest\",plain\r\n"},
		{[]string{`say "ah"`}, "\"say \"\"ah\"\"\"\r\n"},
		{[]string{"line\nbreak", "cr\rhere", "crlf\r\nin"}, "\"line\nbreak\",\"cr\rhere\",\"crlf\r\nin\"\r\n"},
		{[]string{"", " lead", `"`}, ", lead,\"\"\"\"\r\n"},
	} {
		var buf bytes.Buffer
		w := bufio.NewWriter(&buf)
		writeRecord(w, tc.in)
		w.Flush()
		if buf.String() != tc.want {
			t.Errorf("record %q = %q, want %q", tc.in, buf.String(), tc.want)
		}
		r := csv.NewReader(&buf)
		got, err := r.Read()
		if err != nil {
			t.Fatalf("encoding/csv cannot read %q: %v", tc.want, err)
		}
		for i := range got {
			// encoding/csv drops a CR before LF inside quoted fields.
			if w := strings.ReplaceAll(tc.in[i], "\r\n", "\n"); got[i] != w {
				t.Errorf("read back %q, want %q", got[i], w)
			}
		}
	}
}

func TestWriteCSV(t *testing.T) {
	e, vs := fixture(t, 100)
	files := vs[2].Manifest.Files
	f := Filter{EventTypes: []schema.EventType{schema.Arrival, schema.Start}, Columns: []schema.Field{"activity", "occurred_at", "site", "event_id"}}
	want := sorted(e.allEvents(t, files), f)
	var out [2]bytes.Buffer
	for i := range out {
		if _, err := WriteCSV(context.Background(), &out[i], Source{Open: e.opener(), TempDir: e.tmp}, files, f); err != nil {
			t.Fatal(err)
		}
	}
	if !bytes.Equal(out[0].Bytes(), out[1].Bytes()) {
		t.Fatal("two writes differ")
	}
	data := out[0].String()
	if !strings.HasPrefix(data, "site,activity,occurred_at,event_id\r\n") {
		t.Errorf("header line %q", strings.SplitN(data, "\n", 2)[0])
	}
	if !strings.Contains(data, "\"x-ray, chest\"") || !strings.Contains(data, "\"say \"\"ah\"\"\"") || !strings.Contains(data, "\"line\nbreak\"") {
		t.Error("the fixture's awkward activities are not quoted per RFC 4180")
	}
	recs, err := csv.NewReader(strings.NewReader(data)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(recs) != len(want)+1 {
		t.Fatalf("%d records, want %d", len(recs), len(want)+1)
	}
	for i, ev := range want {
		r := recs[i+1]
		if r[0] != ev.Site || r[1] != ev.Activity || r[2] != ev.Value(schema.FieldOccurredAt) || r[3] != ev.EventID {
			t.Fatalf("record %d = %q, want %+v", i+1, r, ev)
		}
		if _, err := time.Parse(time.RFC3339, r[2]); err != nil || !strings.HasSuffix(r[2], "Z") || len(r[2]) != len("2006-01-02T15:04:05.000000Z") {
			t.Fatalf("occurred_at %q is not RFC 3339 UTC with microseconds", r[2])
		}
	}
}

// TestNeutraliseFormula checks OWASP's CSV-injection rule (OWASP ASVS 5.0,
// requirement 1.2.10; the OWASP CSV Injection page adds the carriage
// return): a leading =, +, -, @, tab, CR or NUL gets a single quote,
// except in a value that is a plain decimal number (common practice: a
// spreadsheet reads it as the number). The exception is checked against
// strconv.ParseFloat: every value it lets through parses as a number.
func TestNeutraliseFormula(t *testing.T) {
	for in, want := range map[string]string{
		`=HYPERLINK("http://x","y")`: `'=HYPERLINK("http://x","y")`,
		"+1+1":                       "'+1+1",
		"-2+3":                       "'-2+3",
		"-2*3":                       "'-2*3",
		"-1+cmd|' /C calc'!A0":       "'-1+cmd|' /C calc'!A0",
		"-":                          "'-",
		"+":                          "'+",
		"-.":                         "'-.",
		"-1e":                        "'-1e",
		"-1e+":                       "'-1e+",
		"- 2":                        "'- 2",
		"-2 ":                        "'-2 ",
		"-0x1F":                      "'-0x1F",
		"-Inf":                       "'-Inf",
		"+NaN":                       "'+NaN",
		"-1,5":                       "'-1,5",
		"-2":                         "-2",
		"+1":                         "+1",
		"-0.25":                      "-0.25",
		"-.5":                        "-.5",
		"+5.":                        "+5.",
		"-1e-3":                      "-1e-3",
		"-2E+10":                     "-2E+10",
		"@SUM(A1)":                   "'@SUM(A1)",
		"\tx":                        "'\tx",
		"\rx":                        "'\rx",
		"\x00x":                      "'\x00x",
		"":                           "",
		"triage":                     "triage",
		"a=b":                        "a=b",
		"'=x":                        "'=x",
	} {
		if got := NeutraliseFormula(in); got != want {
			t.Errorf("NeutraliseFormula(%q) = %q, want %q", in, got, want)
		}
		if got := NeutraliseFormula(in); got == in && in != "" && strings.ContainsRune("+-", rune(in[0])) {
			if _, err := strconv.ParseFloat(in, 64); err != nil {
				t.Errorf("NeutraliseFormula(%q) kept a value that is not a number: %v", in, err)
			}
		}
	}
}
