package server

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/metadata"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	pqschema "github.com/apache/arrow-go/v18/parquet/schema"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

const sepsisDir = "../testdata/sepsis"

// sepsisRaw is what the test reads from the raw CSV by itself: the case
// ids, and the total of per-case durations with the wall-clock times read
// in UTC and in Europe/Amsterdam.
type sepsisRaw struct {
	caseIDs    map[string]bool
	totalUTC   float64
	totalLocal float64
	rows       int64
	perCase    map[string]int // rows per case
	// distinct holds the rows distinct in the columns the profile maps
	// (case, activity, timestamp, lifecycle, org:group); rows equal in all
	// of them are one event to the catalog, stored once.
	distinct        map[[5]string]bool
	distinctPerCase map[string]int
}

// readSepsisRaw reads the raw export with encoding/csv and time.Parse,
// independently of the schema package.
func readSepsisRaw(t *testing.T, path string) sepsisRaw {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	cr := csv.NewReader(zr)
	cr.Comma = ';'
	head, err := cr.Read()
	if err != nil {
		t.Fatal(err)
	}
	ci, ti := slices.Index(head, "Case ID"), slices.Index(head, "Complete Timestamp")
	if ci < 0 || ti < 0 {
		t.Fatalf("raw header lacks Case ID or Complete Timestamp: %v", head)
	}
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	type span struct{ lo, hi time.Time }
	utc, local := map[string]*span{}, map[string]*span{}
	widen := func(m map[string]*span, k string, ts time.Time) {
		s := m[k]
		if s == nil {
			m[k] = &span{ts, ts}
			return
		}
		if ts.Before(s.lo) {
			s.lo = ts
		}
		if ts.After(s.hi) {
			s.hi = ts
		}
	}
	const layout = "2006/01/02 15:04:05.000"
	raw := sepsisRaw{caseIDs: map[string]bool{}, perCase: map[string]int{}, distinct: map[[5]string]bool{}, distinctPerCase: map[string]int{}}
	ai, li, gi := slices.Index(head, "Activity"), slices.Index(head, "lifecycle:transition"), slices.Index(head, "org:group")
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		raw.caseIDs[rec[ci]] = true
		raw.rows++
		raw.perCase[rec[ci]]++
		if k := [5]string{rec[ci], rec[ai], rec[ti], rec[li], rec[gi]}; !raw.distinct[k] {
			raw.distinct[k] = true
			raw.distinctPerCase[rec[ci]]++
		}
		u, err := time.Parse(layout, rec[ti])
		if err != nil {
			t.Fatal(err)
		}
		l, err := time.ParseInLocation(layout, rec[ti], ams)
		if err != nil {
			t.Fatal(err)
		}
		widen(utc, rec[ci], u)
		widen(local, rec[ci], l)
	}
	for _, s := range utc {
		raw.totalUTC += s.hi.Sub(s.lo).Seconds()
	}
	for _, s := range local {
		raw.totalLocal += s.hi.Sub(s.lo).Seconds()
	}
	return raw
}

// TestSepsisEndToEnd sends the public "Sepsis Cases" hospital event log
// (testdata/sepsis/README.md) through the API and reads the snapshot back
// with Apache Arrow's Parquet reader, an implementation independent of the
// one that wrote it, then checks the figures published with the log.
func TestSepsisEndToEnd(t *testing.T) {
	gzPath := filepath.Join(sepsisDir, "sepsis-cases.csv.gz")
	data, err := os.ReadFile(gzPath)
	if err != nil {
		t.Fatalf("the sepsis test data is missing: %v", err)
	}
	profile, err := os.ReadFile(filepath.Join(sepsisDir, "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	raw := readSepsisRaw(t, gzPath)

	e := newEnv(t)
	e.createProject("hospital")
	e.createDataset("hospital", "sepsis", string(profile))
	r := e.upload("hospital", "sepsis", e.partner("hospital/sepsis"), "sepsis-cases.csv.gz", data)
	e.mustStatus(r, http.StatusCreated, "upload the sepsis log")
	var res api.UploadResult
	e.decode(r, &res)
	v := res.Version
	if v == nil || v.Number != 1 || len(v.Manifest.Files) == 0 {
		t.Fatalf("upload made %+v, want version 1 with files", v)
	}
	if rep := res.Upload.Report; rep == nil || rep.Rows.Rejected != 0 {
		t.Errorf("report %+v: want no rejected rows", rep)
	}

	member := e.member("hospital")
	var (
		events        int64
		perCase       = map[string]int{}
		first, last   = map[string]int64{}, map[string]int64{}
		activities    = map[string]bool{}
		resources     = map[string]bool{}
		minTS, maxTS  = int64(math.MaxInt64), int64(math.MinInt64)
		rowGroupStats int
	)
	for _, fe := range v.Manifest.Files {
		r := e.get(fmt.Sprintf("/api/v1/projects/hospital/datasets/sepsis/versions/1/files/%s", fe.SHA256), member)
		e.mustStatus(r, http.StatusOK, "download")
		pf, err := file.NewParquetReader(bytes.NewReader(r.Body))
		if err != nil {
			t.Fatalf("arrow cannot open the snapshot: %v", err)
		}
		md := pf.MetaData()
		sch := md.Schema

		// Logical types (Apache Parquet format spec, LogicalTypes.md).
		occ := sch.ColumnIndexByName("occurred_at")
		if occ < 0 {
			t.Fatal("no occurred_at column")
		}
		ts, ok := sch.Column(occ).LogicalType().(pqschema.TimestampLogicalType)
		if !ok || ts.TimeUnit() != pqschema.TimeUnitMicros || !ts.IsAdjustedToUTC() {
			t.Errorf("occurred_at logical type %v, want TIMESTAMP(MICROS, isAdjustedToUTC=true)", sch.Column(occ).LogicalType())
		}
		for _, name := range []string{"site", "case_id", "resource_id", "event_type", "activity"} {
			i := sch.ColumnIndexByName(name)
			if i < 0 {
				t.Errorf("no %s column", name)
				continue
			}
			if _, ok := sch.Column(i).LogicalType().(pqschema.StringLogicalType); !ok {
				t.Errorf("%s logical type %v, want STRING", name, sch.Column(i).LogicalType())
			}
		}

		// Dictionary encoding and statistics, per row group.
		for g := 0; g < md.NumRowGroups(); g++ {
			rg := md.RowGroup(g)
			for _, name := range []string{"event_type", "site"} {
				cc, err := rg.ColumnChunk(sch.ColumnIndexByName(name))
				if err != nil {
					t.Fatal(err)
				}
				if !dictionaryEncoded(cc) {
					t.Errorf("row group %d: %s is not dictionary-encoded (encodings %v)", g, name, cc.Encodings())
				}
			}
			cc, err := rg.ColumnChunk(occ)
			if err != nil {
				t.Fatal(err)
			}
			set, err := cc.StatsSet()
			if err != nil || !set {
				t.Errorf("row group %d: occurred_at has no statistics (%v)", g, err)
				continue
			}
			st, err := cc.Statistics()
			if err != nil {
				t.Fatal(err)
			}
			is, ok := st.(*metadata.Int64Statistics)
			if !ok || !is.HasMinMax() {
				t.Errorf("row group %d: occurred_at statistics %T lack min/max", g, st)
				continue
			}
			rowGroupStats++
			minTS, maxTS = min(minTS, is.Min()), max(maxTS, is.Max())
		}

		// The rows, through Arrow.
		fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 4096}, memory.DefaultAllocator)
		if err != nil {
			t.Fatal(err)
		}
		tbl, err := fr.ReadTable(context.Background())
		if err != nil {
			t.Fatalf("arrow cannot read the snapshot: %v", err)
		}
		col := func(name string) *arrow.Chunked {
			idx := tbl.Schema().FieldIndices(name)
			if len(idx) != 1 {
				t.Fatalf("arrow schema has no single %s column: %v", name, tbl.Schema())
			}
			return tbl.Column(idx[0]).Data()
		}
		if tt, ok := col("occurred_at").DataType().(*arrow.TimestampType); !ok || tt.Unit != arrow.Microsecond || tt.TimeZone != "UTC" {
			t.Errorf("arrow occurred_at type %v, want timestamp[us, tz=UTC]", col("occurred_at").DataType())
		}
		cases, whens, acts, ress := col("case_id").Chunks(), col("occurred_at").Chunks(), col("activity").Chunks(), col("resource_id").Chunks()
		for k := range cases {
			cs, ok1 := cases[k].(*array.String)
			ws, ok2 := whens[k].(*array.Timestamp)
			as, ok3 := acts[k].(*array.String)
			rs, ok4 := ress[k].(*array.String)
			if !ok1 || !ok2 || !ok3 || !ok4 {
				t.Fatalf("arrow column types %T %T %T %T", cases[k], whens[k], acts[k], ress[k])
			}
			for i := 0; i < cs.Len(); i++ {
				id := cs.Value(i)
				if !anonymize.IsPseudonym(id) {
					t.Fatalf("case_id %q is not a 26-character pseudonym", id)
				}
				if raw.caseIDs[id] {
					t.Fatalf("raw case id %q appears as a case_id in the snapshot", id)
				}
				us := int64(ws.Value(i))
				events++
				perCase[id]++
				if f, ok := first[id]; !ok || us < f {
					first[id] = us
				}
				if l, ok := last[id]; !ok || us > l {
					last[id] = us
				}
				if as.IsValid(i) {
					activities[as.Value(i)] = true
				}
				if rs.IsValid(i) {
					if !anonymize.IsPseudonym(rs.Value(i)) {
						t.Fatalf("resource_id %q is not a pseudonym", rs.Value(i))
					}
					resources[rs.Value(i)] = true
				}
			}
		}
		tbl.Release()
	}
	if rowGroupStats == 0 {
		t.Fatal("no row group statistics read")
	}

	// Figures published with the log: its metadata record (XES meta
	// extensions), as listed in testdata/sepsis/README.md.
	if len(perCase) != 1050 { // traces (cases): 1050
		t.Errorf("%d cases, want 1050", len(perCase))
	}
	// The log's events, as published, and as the catalog holds them: rows
	// equal in every mapped column are one event, stored once and counted
	// as copies.
	if raw.rows != 15214 { // events: 15214
		t.Errorf("the raw file has %d rows, want 15214", raw.rows)
	}
	if ev := res.Upload.Events; events != int64(len(raw.distinct)) || ev == nil || ev.Read != raw.rows || ev.Copies != raw.rows-events {
		t.Errorf("%d events stored, counts %+v; the raw file has %d rows, %d distinct in the mapped columns", events, ev, raw.rows, len(raw.distinct))
	}
	if len(activities) != 16 { // distinct activities: 16
		t.Errorf("%d distinct activities, want 16", len(activities))
	}
	if len(resources) != 26 { // distinct org:group values: 26
		t.Errorf("%d distinct resource pseudonyms, want 26", len(resources))
	}
	span := func(m map[string]int) (lo, hi int) {
		lo = math.MaxInt
		for _, n := range m {
			lo, hi = min(lo, n), max(hi, n)
		}
		return lo, hi
	}
	if lo, hi := span(raw.perCase); lo != 3 || hi != 185 { // events per case, min / max: 3 / 185
		t.Errorf("raw events per case %d..%d, want 3..185", lo, hi)
	}
	// Case ids are pseudonyms in the snapshot: compare the counts per case
	// as sorted lists.
	counts := func(m map[string]int) []int {
		out := make([]int, 0, len(m))
		for _, n := range m {
			out = append(out, n)
		}
		slices.Sort(out)
		return out
	}
	if lo, hi := span(perCase); !slices.Equal(counts(perCase), counts(raw.distinctPerCase)) {
		t.Errorf("events per case %d..%d, not the raw file's distinct events per case", lo, hi)
	}
	wantFirst := time.Date(2013, 11, 7, 8, 18, 29, 0, time.FixedZone("", 3600))  // first event 2013-11-07T08:18:29+01:00
	wantLast := time.Date(2015, 6, 5, 12, 25, 11, 0, time.FixedZone("", 2*3600)) // last event 2015-06-05T12:25:11+02:00
	if got := time.UnixMicro(minTS); !got.Equal(wantFirst) {
		t.Errorf("first event (row group statistics) %s, want %s", got.UTC(), wantFirst)
	}
	if got := time.UnixMicro(maxTS); !got.Equal(wantLast) {
		t.Errorf("last event (row group statistics) %s, want %s", got.UTC(), wantLast)
	}
	var rep quality.Report
	e.decode(e.get("/api/v1/projects/hospital/datasets/sepsis/versions/1/quality", member), &rep)
	if rep.TimeRange.First == nil || !rep.TimeRange.First.Equal(wantFirst) || !rep.TimeRange.Last.Equal(wantLast) {
		t.Errorf("report time range %+v, want %s..%s", rep.TimeRange, wantFirst, wantLast)
	}

	var total float64
	minDur, maxDur := math.Inf(1), math.Inf(-1)
	for id := range perCase {
		d := float64(last[id]-first[id]) / 1e6
		total += d
		minDur, maxDur = math.Min(minDur, d), math.Max(maxDur, d)
	}
	mean := total / float64(len(perCase))
	if math.Abs(mean-2459733.94) > 0.01 { // case duration, mean: 2459733.94 s
		t.Errorf("mean case duration %.4f s, want 2459733.94 s", mean)
	}
	if math.Abs(total-2.582720637e9) > 1 { // case durations, total: 2.582720637E9 s
		t.Errorf("total case duration %.1f s, want 2.582720637E9 s", total)
	}
	if minDur != 122 { // case duration, min: 122 s
		t.Errorf("min case duration %v s, want 122 s", minDur)
	}
	if maxDur != 3.6488789e7 { // case duration, max: 3.6488789E7 s
		t.Errorf("max case duration %v s, want 3.6488789E7 s", maxDur)
	}

	// The published durations need the Europe/Amsterdam reading: the
	// test's own reading of the raw file agrees in that zone, and read as
	// UTC the total is off (by an hour for each case that spans a
	// daylight-saving change in one direction but not back).
	if math.Abs(raw.totalLocal-total) > 1e-6 {
		t.Errorf("raw file read in Europe/Amsterdam gives total %.1f s, the snapshot %.1f s", raw.totalLocal, total)
	}
	if diff := math.Abs(raw.totalUTC - 2.582720637e9); diff < 3600 {
		t.Errorf("raw file read as UTC gives total %.1f s, within %.0f s of the published figure: the zone would not matter", raw.totalUTC, diff)
	}
	if len(raw.caseIDs) != 1050 {
		t.Errorf("raw file has %d case ids, want 1050", len(raw.caseIDs))
	}
	t.Logf("total case duration: %.0f s read in Europe/Amsterdam, %.0f s read as UTC", total, raw.totalUTC)

	checkNoRawIDs(t, e, "RAW-NEVER-SENT") // walks bodies, log, bbolt, blobs, and the snapshot's pseudonyms
}

// dictionaryEncoded reports whether a column chunk has a dictionary page
// and its data pages are dictionary-encoded (RLE_DICTIONARY or
// PLAIN_DICTIONARY, Apache Parquet format spec, Encodings.md; page types
// DATA_PAGE = 0 and DATA_PAGE_V2 = 3 as numbered in parquet.thrift).
func dictionaryEncoded(cc *metadata.ColumnChunkMetaData) bool {
	if !cc.HasDictionaryPage() {
		return false
	}
	isDict := func(enc parquet.Encoding) bool {
		return enc == parquet.Encodings.RLEDict || enc == parquet.Encodings.PlainDict
	}
	if stats := cc.EncodingStats(); len(stats) > 0 {
		data := 0
		for _, s := range stats {
			if s.PageType == 0 || s.PageType == 3 { // DATA_PAGE, DATA_PAGE_V2
				if !isDict(s.Encoding) {
					return false
				}
				data++
			}
		}
		return data > 0
	}
	return slices.ContainsFunc(cc.Encodings(), isDict)
}
