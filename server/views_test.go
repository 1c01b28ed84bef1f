package server

import (
	"archive/tar"
	"archive/zip"
	"bytes"
	"compress/gzip"
	"context"
	"crypto/sha256"
	"encoding/csv"
	"encoding/hex"
	"encoding/json"
	"io"
	"net/http"
	"os"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/goccy/go-yaml"
	"github.com/santhosh-tekuri/jsonschema/v6"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// viewsEnv is a dataset with two appended versions of the ward profile.
func viewsEnv(t *testing.T) (*testEnv, string, string) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	partner := e.partner("ward/events")
	e.mustStatus(e.upload("ward", "events", partner, "d4.csv", wardFile(4, 90)), http.StatusCreated, "upload 1")
	e.mustStatus(e.upload("ward", "events", partner, "d5.csv", wardFile(5, 60)), http.StatusCreated, "upload 2")
	return e, "/api/v1/projects/ward/datasets/events", e.member("ward")
}

// storedRows reads every row of a version from its snapshot files.
func storedRows(t *testing.T, e *testEnv, v catalog.Version) []schema.Event {
	var out []schema.Event
	for _, f := range v.Manifest.Files {
		r, err := e.store.Blobs().Open(context.Background(), f.SHA256)
		if err != nil {
			t.Fatal(err)
		}
		err = catalog.ReadSnapshot(r, r.Size(), func(ev *schema.Event) error { out = append(out, *ev); return nil })
		r.Close()
		if err != nil {
			t.Fatal(err)
		}
	}
	return out
}

func TestExportOverHTTP(t *testing.T) {
	e, ds, member := viewsEnv(t)
	var v catalog.Version
	e.decode(e.get(ds+"/versions/2", member), &v)
	stored := storedRows(t, e, v)

	// Whole version as one Parquet file: byte-identical on every request,
	// read by apache/arrow-go with every stored row.
	a := e.get(ds+"/versions/2/export", member)
	e.mustStatus(a, http.StatusOK, "export parquet")
	b := e.get(ds+"/versions/2/export?format=parquet", member)
	if !bytes.Equal(a.Body, b.Body) || a.Header.Get("ETag") == "" {
		t.Fatal("two exports of the same version differ")
	}
	pf, err := file.NewParquetReader(bytes.NewReader(a.Body))
	if err != nil {
		t.Fatalf("arrow-go cannot open the export: %v", err)
	}
	if pf.NumRows() != int64(len(stored)) || pf.NumRows() != v.Manifest.Rows {
		t.Fatalf("export has %d rows, version %d", pf.NumRows(), v.Manifest.Rows)
	}
	if kv := pf.MetaData().KeyValueMetadata(); kv.FindValue("flowcat.snapshot_id") == nil || *kv.FindValue("flowcat.snapshot_id") != v.SnapshotID.String() {
		t.Errorf("export metadata lacks the snapshot id")
	}
	tbl := arrowtest.Table(t, pf)
	want := map[string]int{}
	for _, ev := range stored {
		want[ev.CaseID+"|"+string(ev.Type)+"|"+ev.Value(schema.FieldOccurredAt)]++
	}
	idx := func(n string) int { return tbl.Schema().FieldIndices(n)[0] }
	cases, types, whens := tbl.Column(idx("case_id")).Data().Chunks(), tbl.Column(idx("event_type")).Data().Chunks(), tbl.Column(idx("occurred_at")).Data().Chunks()
	for k := range cases {
		cs, ts, ws := cases[k].(*array.String), types[k].(*array.String), whens[k].(*array.Timestamp)
		for i := 0; i < cs.Len(); i++ {
			ev := schema.Event{OccurredAt: ws.Value(i).ToTime(arrow.Microsecond)}
			key := cs.Value(i) + "|" + ts.Value(i) + "|" + ev.Value(schema.FieldOccurredAt)
			want[key]--
		}
	}
	for k, n := range want {
		if n != 0 {
			t.Fatalf("row %s: %d more in the store than in the export", k, n)
		}
	}

	// Filtered CSV with a column subset: RFC 4180 text, read back.
	c := e.get(ds+"/versions/2/export?format=csv&from=2024-03-04T23:00:00Z&columns=occurred_at,event_type,activity&type=start", member)
	e.mustStatus(c, http.StatusOK, "export csv")
	if !strings.HasPrefix(c.Header.Get("Content-Type"), "text/csv") || !bytes.Contains(c.Body, []byte("\r\n")) {
		t.Errorf("csv: content type %q, CRLF line ends %v", c.Header.Get("Content-Type"), bytes.Contains(c.Body, []byte("\r\n")))
	}
	recs, err := csv.NewReader(bytes.NewReader(c.Body)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(recs[0], ",") != "event_type,activity,occurred_at" || len(recs) != 1+20 {
		t.Fatalf("csv header %v and %d rows, want schema order and the 20 starts of day 5", recs[0], len(recs)-1)
	}
	if c2 := e.get(ds+"/versions/2/export?format=csv&from=2024-03-04T23:00:00Z&columns=occurred_at,event_type,activity&type=start", member); !bytes.Equal(c.Body, c2.Body) {
		t.Error("two filtered CSV exports differ")
	}

	// Bad requests name the problem.
	for q, msg := range map[string]string{
		"from=2024-03-06T00:00:00Z&to=2024-03-05T00:00:00Z": "is not before",
		"columns=case_id,ward":                              `unknown column "ward"`,
		"type=teleport":                                     "unknown event type",
		"sites=ward-3":                                      `unknown parameter "sites"`,
		"format=xlsx":                                       "want parquet, csv or xes",
		"from=monday":                                       "RFC 3339",
	} {
		r := e.get(ds+"/versions/2/export?"+q, member)
		if r.Status != http.StatusBadRequest || !strings.Contains(e.apiErr(r).Error.Message, msg) {
			t.Errorf("export ?%s: %d %s, want 400 with %q", q, r.Status, clipBody(r.Body), msg)
		}
	}
	e.mustStatus(e.get(ds+"/versions/9/export", member), http.StatusNotFound, "export of an unknown version")
}

func TestBundleAndCitation(t *testing.T) {
	e, ds, member := viewsEnv(t)
	var v catalog.Version
	e.decode(e.get(ds+"/versions/2", member), &v)
	tarA := e.get(ds+"/versions/2/bundle", member)
	e.mustStatus(tarA, http.StatusOK, "tar bundle")
	tarB := e.get(ds+"/versions/2/bundle?format=tar", member)
	if !bytes.Equal(tarA.Body, tarB.Body) {
		t.Fatal("two tar bundles differ")
	}
	entries := map[string][]byte{}
	tr := tar.NewReader(bytes.NewReader(tarA.Body))
	for {
		h, err := tr.Next()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(tr)
		entries[h.Name] = b
	}
	m := sha256.Sum256(entries["manifest.json"])
	if hex.EncodeToString(m[:]) != v.SnapshotID.String() {
		t.Fatal("the bundle's manifest.json does not hash to the snapshot id")
	}
	for _, f := range v.Manifest.Files {
		got := sha256.Sum256(entries["data/"+f.SHA256.String()+".parquet"])
		if got != f.SHA256 {
			t.Errorf("bundle file %s: wrong bytes", f.SHA256)
		}
	}
	for _, name := range []string{"README.md", "DICTIONARY.md", "SHA256SUMS", "CITATION.cff"} {
		if len(entries[name]) == 0 {
			t.Errorf("bundle lacks %s", name)
		}
	}
	zipA := e.get(ds+"/versions/2/bundle?format=zip", member)
	zipB := e.get(ds+"/versions/2/bundle?format=zip", member)
	if zipA.Status != http.StatusOK || !bytes.Equal(zipA.Body, zipB.Body) {
		t.Fatal("zip bundles differ or failed")
	}
	zr, err := zip.NewReader(bytes.NewReader(zipA.Body), int64(len(zipA.Body)))
	if err != nil || len(zr.File) != len(entries) {
		t.Fatalf("zip: %v, %d entries, tar %d", err, len(zr.File), len(entries))
	}
	e.mustStatus(e.get(ds+"/versions/2/bundle?format=rar", member), http.StatusBadRequest, "rar bundle")

	// CITATION.cff against the Citation File Format 1.2.0 JSON Schema
	// (citation-file-format/citation-file-format, schema.json; copied with
	// its provenance in catalog/export/testdata).
	cit := e.get(ds+"/versions/2/citation", member)
	e.mustStatus(cit, http.StatusOK, "citation")
	if !bytes.Equal(cit.Body, entries["CITATION.cff"]) {
		t.Error("the citation endpoint and the bundle's CITATION.cff differ")
	}
	validateCFF(t, cit.Body)
	for _, want := range []string{v.SnapshotID.String(), "version: \"2\"", "Project ward"} {
		if !strings.Contains(string(cit.Body), want) {
			t.Errorf("CITATION.cff lacks %q:\n%s", want, cit.Body)
		}
	}
	// Retracted: data and bundle 410, citation and summary stay.
	e.mustStatus(e.postJSON(ds+"/versions/2/retract", e.admin, map[string]string{"reason": "duplicated night"}), http.StatusOK, "retract")
	for _, p := range []string{"/bundle", "/export", "/summary?site=ward-3"} {
		e.mustStatus(e.get(ds+"/versions/2"+p, member), http.StatusGone, "retracted "+p)
	}
	e.mustStatus(e.get(ds+"/versions/2/citation", member), http.StatusOK, "retracted citation")
	e.mustStatus(e.get(ds+"/versions/2/summary", member), http.StatusGone, "retracted stored summary")
	e.mustStatus(e.get(ds+"/versions/2/quality", member), http.StatusOK, "retracted quality report")
}

func validateCFF(t *testing.T, doc []byte) {
	t.Helper()
	raw, err := os.ReadFile("../catalog/export/testdata/cff-1.2.0.schema.json")
	if err != nil {
		t.Fatal(err)
	}
	sch, err := jsonschema.UnmarshalJSON(bytes.NewReader(raw))
	if err != nil {
		t.Fatal(err)
	}
	c := jsonschema.NewCompiler()
	if err := c.AddResource("cff.json", sch); err != nil {
		t.Fatal(err)
	}
	compiled, err := c.Compile("cff.json")
	if err != nil {
		t.Fatal(err)
	}
	var y any
	if err := yaml.Unmarshal(doc, &y); err != nil {
		t.Fatal(err)
	}
	js, _ := json.Marshal(y)
	inst, _ := jsonschema.UnmarshalJSON(bytes.NewReader(js))
	if err := compiled.Validate(inst); err != nil {
		t.Fatalf("CITATION.cff is not valid CFF 1.2.0: %v\n%s", err, doc)
	}
}

func TestSummaryAndDiffOverHTTP(t *testing.T) {
	e, ds, member := viewsEnv(t)
	r := e.get(ds+"/versions/2/summary", member)
	e.mustStatus(r, http.StatusOK, "summary")
	var sum struct {
		Events   int `json:"events"`
		Arrivals struct {
			Total int `json:"total"`
		} `json:"arrivals"`
	}
	e.decode(r, &sum)
	// Both days' files name the same 30 cases (wardRows): a case is its id
	// over every file of the version, so 30 arrivals, not 30 + 20.
	if sum.Events != 150 || sum.Arrivals.Total != 30 {
		t.Fatalf("summary: %+v, want 150 events and 30 arrivals (one per case id)", sum)
	}
	// Stored gzip-compressed; sent plain to a client that does not take gzip.
	plain := e.do(http.MethodGet, ds+"/versions/2/summary", member, nil, map[string]string{"Accept-Encoding": "identity"})
	gz := e.do(http.MethodGet, ds+"/versions/2/summary", member, nil, map[string]string{"Accept-Encoding": "gzip"})
	if plain.Header.Get("Content-Encoding") != "" || gz.Header.Get("Content-Encoding") != "gzip" || !json.Valid(plain.Body) {
		t.Fatalf("encodings: plain %q, gzip %q", plain.Header.Get("Content-Encoding"), gz.Header.Get("Content-Encoding"))
	}
	zr, err := gzip.NewReader(bytes.NewReader(gz.Body))
	if err != nil {
		t.Fatal(err)
	}
	unz, _ := io.ReadAll(zr)
	if !bytes.Equal(unz, plain.Body) || !bytes.Equal(plain.Body, r.Body) {
		t.Fatal("the gzip and plain summaries differ")
	}
	// Filtered on demand: one day reads only that day's file.
	f := e.get(ds+"/versions/2/summary?from=2024-03-04T23:00:00Z&to=2024-03-05T23:00:00Z", member)
	e.mustStatus(f, http.StatusOK, "filtered summary")
	e.decode(f, &sum)
	if sum.Events != 60 || f.Header.Get("X-Flowcat-Row-Groups-Skipped") != "1" {
		t.Fatalf("filtered summary: %d events, skipped %q", sum.Events, f.Header.Get("X-Flowcat-Row-Groups-Skipped"))
	}
	e.mustStatus(e.get(ds+"/versions/2/summary?type=start", member), http.StatusBadRequest, "summary by type")
	e.mustStatus(e.get(ds+"/versions/2/summary?site=", member), http.StatusBadRequest, "summary with an empty site")
	// The same filter in another order: the same bytes and the same ETag.
	x := e.get(ds+"/versions/2/export?columns=site,activity&format=csv", member)
	y := e.get(ds+"/versions/2/export?format=csv&columns=activity,site", member)
	if x.Status != 200 || !bytes.Equal(x.Body, y.Body) || x.Header.Get("ETag") != y.Header.Get("ETag") {
		t.Errorf("export with columns in another order: %d, same bytes %v, ETags %s %s", x.Status, bytes.Equal(x.Body, y.Body), x.Header.Get("ETag"), y.Header.Get("ETag"))
	}

	d := e.get(ds+"/diff?a=1&b=2", member)
	e.mustStatus(d, http.StatusOK, "diff")
	var diff api.Diff
	e.decode(d, &diff)
	if diff.Events.Added != 60 || diff.Events.Removed != 0 || diff.Events.SharedFiles != 1 || diff.From.Version != 1 || diff.To.Version != 2 {
		t.Fatalf("diff 1..2: %+v", diff.Events)
	}
	if ev := diff.Summary["events"]; ev == nil || *ev != 60 {
		t.Errorf("summary delta of events: %v", ev)
	}
	if len(diff.Events.BySite) != 1 || diff.Events.BySite[0].Day != "2024-03-05" {
		t.Errorf("diff by site and day: %+v", diff.Events.BySite)
	}
	var back api.Diff
	e.decode(e.get(ds+"/diff?a=latest&b=1", member), &back)
	if back.Events.Removed != 60 || back.Events.Added != 0 {
		t.Errorf("diff 2..1: %+v", back.Events)
	}
	for q, st := range map[string]int{"a=1": 400, "a=1&b=x": 400, "a=1&b=7": 404, "a=1&b=2&to=2024-01-01T00:00:00Z&from=2024-02-01T00:00:00Z": 400} {
		if r := e.get(ds+"/diff?"+q, member); r.Status != st {
			t.Errorf("diff ?%s: %d, want %d", q, r.Status, st)
		}
	}
}
