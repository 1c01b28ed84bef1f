package catalog

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"testing"

	"github.com/flowcat-catalog/flowcat/schema"
)

func TestRejectAbove(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 50 })
	e.dataset(t, "p", "d", func(s *DatasetSpec) { r := 0.05; s.RejectAbove = &r })
	ctx := context.Background()
	data := genCSV(genOpt{Seed: 7, N: 1000, Invalid: 10, Shuffle: true}) // 10% unknown event types

	res, err := e.s.Ingest(ctx, "p", "d", bytes.NewReader(data), IngestOptions{Filename: "n.csv"})
	if !errors.Is(err, ErrRejected) {
		t.Fatalf("err = %v, want ErrRejected", err)
	}
	if res == nil || res.Version != nil || res.Upload.Status != UploadRejected || res.Upload.Report == nil || res.Upload.Version != 0 {
		t.Fatalf("result = %+v", res)
	}
	rep := res.Upload.Report
	if rep.Rows.Total != 1000 || rep.Rows.Rejected != 100 || rep.RejectedShare() != 0.1 {
		t.Errorf("report rows = %+v", rep.Rows)
	}
	if len(rep.Rejections) != 1 || rep.Rejections[0].Reason != schema.ReasonUnknownCode || rep.Rejections[0].Count != 100 {
		t.Errorf("rejections = %+v", rep.Rejections)
	}
	ups, err := e.s.Uploads(ctx, "p", "d")
	if err != nil {
		t.Fatal(err)
	}
	if len(ups) != 1 || ups[0].Status != UploadRejected || ups[0].Report == nil || ups[0].Report.Rows.Rejected != 100 || ups[0].SHA256 == "" {
		t.Errorf("stored uploads = %+v", ups)
	}
	if vs, _ := e.s.Versions(ctx, "p", "d"); len(vs) != 0 {
		t.Errorf("versions = %+v", vs)
	}
	if d, _ := e.s.Dataset(ctx, "p", "d"); d.Latest != 0 || d.Uploads != 1 {
		t.Errorf("dataset = %+v", d)
	}
	if ids := e.blobIDs(t); len(ids) != 0 {
		t.Errorf("a rejected upload wrote blobs %v", ids)
	}
	e.assertTempEmpty(t)

	// Rejected bytes are not a duplicate of anything: sent again they are
	// judged again (and rejected again).
	if _, err := e.s.Ingest(ctx, "p", "d", bytes.NewReader(data), IngestOptions{}); !errors.Is(err, ErrRejected) {
		t.Errorf("second send: %v", err)
	}

	// Exactly at the threshold is accepted: the rule is "above".
	e.dataset(t, "p", "ten", func(s *DatasetSpec) { r := 0.1; s.RejectAbove = &r })
	if res := e.ingest(t, "p", "ten", data, ""); res.Upload.Status != UploadAccepted || res.Version.Manifest.Rows != 900 {
		t.Errorf("at the threshold: %+v", res.Upload)
	}

	// No valid row at all is a rejection even when the threshold allows all.
	e.dataset(t, "p", "all", func(s *DatasetSpec) { r := 1.0; s.RejectAbove = &r })
	res, err = e.s.Ingest(ctx, "p", "all", bytes.NewReader(genCSV(genOpt{Seed: 7, N: 20, Invalid: 1})), IngestOptions{})
	if !errors.Is(err, ErrRejected) || res.Upload.Status != UploadRejected {
		t.Errorf("no valid rows: %v %+v", err, res)
	}
	e.assertTempEmpty(t)
}

func TestFileInvalid(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	ctx := context.Background()
	cases := []struct {
		name string
		data []byte
		rule string
	}{
		{"missing case_id", genCSV(genOpt{Seed: 8, N: 50, DropCols: []int{1}}), schema.RuleMissingColumn},
		{"empty", nil, schema.RuleEmptyFile},
		{"header only", []byte(strings.Join(header[:], ",") + "\n"), schema.RuleNoRows},
	}
	for i, c := range cases {
		res, err := e.s.Ingest(ctx, "p", "d", bytes.NewReader(c.data), IngestOptions{Filename: c.name})
		if !errors.Is(err, ErrFileInvalid) {
			t.Errorf("%s: err = %v, want ErrFileInvalid", c.name, err)
			continue
		}
		var fe *schema.FileError
		if !errors.As(err, &fe) || fe.Rule != c.rule {
			t.Errorf("%s: err = %v, want a *schema.FileError of rule %s", c.name, err, c.rule)
		}
		if res == nil || res.Version != nil || res.Upload.Status != UploadFailed || res.Upload.Error == nil ||
			res.Upload.Error.Rule != c.rule || res.Upload.ID != UploadIDOf(i+1) {
			t.Errorf("%s: result = %+v", c.name, res)
		}
	}
	if c := cases[0]; true {
		ups, _ := e.s.Uploads(ctx, "p", "d")
		if len(ups) != len(cases) || ups[0].Error == nil || ups[0].Error.Column != "case_id" || ups[0].Status != UploadFailed {
			t.Errorf("%s: stored uploads = %+v", c.name, ups)
		}
	}
	if vs, _ := e.s.Versions(ctx, "p", "d"); len(vs) != 0 {
		t.Errorf("versions = %+v", vs)
	}
	if ids := e.blobIDs(t); len(ids) != 0 {
		t.Errorf("blobs = %v", ids)
	}
	e.assertTempEmpty(t)
}

// TestSameFileTwoDatasets ingests one file into two datasets of one project
// (same pseudonym key): the snapshot files are byte-identical, so the blob
// store holds one.
func TestSameFileTwoDatasets(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 300 })
	e.dataset(t, "p", "a", nil)
	e.dataset(t, "p", "b", func(s *DatasetSpec) { s.Title = "other title" })
	data := genCSV(genOpt{Seed: 10, N: 2000, Shuffle: true})
	ra := e.ingest(t, "p", "a", data, "a.csv")
	rb := e.ingest(t, "p", "b", data, "b.csv")
	fa, fb := ra.Version.Manifest.Files[0], rb.Version.Manifest.Files[0]
	if fa.SHA256 != fb.SHA256 || fa.Bytes != fb.Bytes {
		t.Errorf("one file, two snapshots: %s and %s", fa.SHA256, fb.SHA256)
	}
	if !bytes.Equal(e.blobBytes(t, fa.SHA256), e.blobBytes(t, fb.SHA256)) || len(e.blobIDs(t)) != 1 {
		t.Errorf("blobs = %v", e.blobIDs(t))
	}
	if rb.Upload.Status != UploadAccepted {
		t.Errorf("the second dataset saw a duplicate: %+v", rb.Upload)
	}
}

func TestConcurrentUploads(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 200 })
	e.dataset(t, "p", "d", nil)
	ctx := context.Background()
	files := make([][]byte, 4)
	for i := range files {
		files[i] = genCSV(genOpt{Seed: uint64(20 + i), N: 1500, Shuffle: true})
	}
	var wg sync.WaitGroup
	results := make([]*IngestResult, len(files))
	errs := make([]error, len(files))
	for i := range files {
		wg.Go(func() {
			results[i], errs[i] = e.s.Ingest(ctx, "p", "d", bytes.NewReader(files[i]), IngestOptions{By: "site"})
		})
	}
	wg.Wait()
	seen := map[int]bool{}
	for i, err := range errs {
		if err != nil {
			t.Fatalf("upload %d: %v", i, err)
		}
		seen[results[i].Version.Number] = true
	}
	if len(seen) != 4 || !seen[1] || !seen[4] {
		t.Errorf("versions made: %v", seen)
	}
	vs, err := e.s.Versions(ctx, "p", "d")
	if err != nil {
		t.Fatal(err)
	}
	if len(vs) != 4 {
		t.Fatalf("%d versions", len(vs))
	}
	for i, v := range vs {
		m := v.Manifest
		if v.Number != i+1 || m.Parent != i || len(m.Files) != i+1 || len(m.Uploads) != i+1 || m.Rows != int64(1500*(i+1)) {
			t.Errorf("version %d: parent %d, %d files, %d uploads, %d rows", v.Number, m.Parent, len(m.Files), len(m.Uploads), m.Rows)
		}
		if i > 0 {
			for j, f := range vs[i-1].Manifest.Files {
				if m.Files[j] != f {
					t.Errorf("version %d lost file %d of its parent", v.Number, j)
				}
			}
		}
	}
	ids := map[string]bool{}
	for _, f := range vs[3].Manifest.Files {
		ids[f.SHA256.String()] = true
	}
	if len(ids) != 4 || len(e.blobIDs(t)) != 4 {
		t.Errorf("the last version lists %d distinct files; %d blobs", len(ids), len(e.blobIDs(t)))
	}
	if d, _ := e.s.Dataset(ctx, "p", "d"); d.Latest != 4 || d.Uploads != 4 {
		t.Errorf("dataset = %+v", d)
	}

	// Two goroutines send the same bytes: one version, one duplicate of it.
	e.dataset(t, "p", "twice", nil)
	var r2 [2]*IngestResult
	var e2 [2]error
	for i := range 2 {
		wg.Go(func() {
			r2[i], e2[i] = e.s.Ingest(ctx, "p", "twice", bytes.NewReader(files[0]), IngestOptions{})
		})
	}
	wg.Wait()
	if e2[0] != nil || e2[1] != nil {
		t.Fatal(e2)
	}
	st := map[UploadStatus]int{}
	for _, r := range r2 {
		st[r.Upload.Status]++
		if r.Version == nil || r.Version.Number != 1 || r.Upload.Version != 1 {
			t.Errorf("result = %+v", r.Upload)
		}
	}
	if st[UploadAccepted] != 1 || st[UploadDuplicate] != 1 {
		t.Errorf("statuses = %v", st)
	}
	if vs, _ := e.s.Versions(ctx, "p", "twice"); len(vs) != 1 {
		t.Errorf("versions = %d", len(vs))
	}
	if ups, _ := e.s.Uploads(ctx, "p", "twice"); len(ups) != 2 {
		t.Errorf("uploads = %+v", ups)
	}
	e.assertTempEmpty(t)
}

// TestUploadLimits: the store's reader limits fail an upload that goes
// over one while it streams (a gzip file inflating past the byte limit
// spills nothing to disk), with the limit named, an upload record, and
// nothing stored.
func TestUploadLimits(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	ctx := context.Background()
	cases := []struct {
		name string
		lim  schema.Limits
		data []byte
		rule string
	}{
		{"rows.csv", schema.Limits{MaxRows: 1000}, genCSV(genOpt{Seed: 8, N: 1001}), schema.RuleTooManyRows},
		{"bomb.csv.gz", schema.Limits{MaxBytes: 64 << 10}, gzipBytes(genCSV(genOpt{Seed: 9, N: 10000})), schema.RuleTooManyBytes},
	}
	for _, c := range cases {
		e.open(t, func(o *Options) { o.RunEvents = 100; o.Limits = c.lim })
		res, err := e.s.Ingest(ctx, "p", "d", bytes.NewReader(c.data), IngestOptions{Filename: c.name})
		var fe *schema.FileError
		if !errors.Is(err, ErrFileInvalid) || !errors.As(err, &fe) || fe.Rule != c.rule {
			t.Errorf("%s: err = %v, want rule %s", c.name, err, c.rule)
			continue
		}
		if res == nil || res.Upload.Status != UploadFailed || res.Upload.Error == nil || res.Upload.Error.Rule != c.rule {
			t.Errorf("%s: result = %+v", c.name, res)
		}
	}
	if ups, _ := e.s.Uploads(ctx, "p", "d"); len(ups) != len(cases) {
		t.Errorf("%d upload records, want %d", len(ups), len(cases))
	}
	if vs, _ := e.s.Versions(ctx, "p", "d"); len(vs) != 0 {
		t.Errorf("versions = %+v", vs)
	}
	if ids := e.blobIDs(t); len(ids) != 0 {
		t.Errorf("blobs = %v", ids)
	}
	e.assertTempEmpty(t)
	// At the limit the file is taken.
	e.open(t, func(o *Options) { o.Limits = schema.Limits{MaxRows: 1000} })
	if res := e.ingest(t, "p", "d", genCSV(genOpt{Seed: 8, N: 1000}), "ok.csv"); res.Upload.Status != UploadAccepted {
		t.Errorf("1000 rows: %+v", res.Upload)
	}
}

// TestRejectedRowsSay: the version's report names each rejected row by
// file, line, column, field and rule, with the offending text of a
// non-identifier field (the unknown code, the timestamp as read) and what
// is wrong with it; the text report shows them. The row whose time holds
// its own case id shows no text.
func TestRejectedRowsSay(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { r := 0.9; s.RejectAbove = &r })
	good := "site,case_id,event_type,occurred_at\ns,c1,arrival,2026-05-01T10:00:00Z\n"
	e.ingest(t, "p", "d", []byte(good), "monday.csv")
	bad := "site,case_id,event_type,occurred_at\n" +
		"s,c2,arrival,2026-05-02T10:00:00Z\n" +
		"s,c3,teleport,2026-05-02T10:05:00Z\n" +
		"s,c4,arrival,02/05/2026 10:10\n" +
		"s,CASE-9931,arrival,CASE-9931\n"
	v := e.ingest(t, "p", "d", []byte(bad), "tuesday.csv").Version
	q := e.report(t, v)
	var got []string
	for _, rc := range q.Rejections {
		for _, s := range rc.Samples {
			got = append(got, fmt.Sprintf("%s %s:%d %s/%s %q", rc.Reason, s.File, s.Line, s.Column, s.Field, s.Text))
		}
	}
	want := []string{
		`bad_timestamp tuesday.csv:4 occurred_at/occurred_at "02/05/2026 10:10"`,
		`bad_timestamp tuesday.csv:5 occurred_at/occurred_at ""`,
		`unknown_code tuesday.csv:3 event_type/event_type "teleport"`,
	}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("rejection samples\n%s\nwant\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	var text bytes.Buffer
	if err := q.Text(&text, false); err != nil {
		t.Fatal(err)
	}
	for _, w := range []string{
		`unknown_code: tuesday.csv line 3, column event_type (event_type): code "teleport" is not an event type`,
		`bad_timestamp: tuesday.csv line 4, column occurred_at (occurred_at): "02/05/2026 10:10" is not an RFC 3339 / ISO 8601 timestamp`,
		`bad_timestamp: tuesday.csv line 5, column occurred_at (occurred_at): the value (not shown: it holds an identifier of the row)`,
	} {
		// The text wraps at 80 columns: compare with whitespace runs as one space.
		if !strings.Contains(strings.Join(strings.Fields(text.String()), " "), w) {
			t.Errorf("text report lacks %q:\n%s", w, text.String())
		}
	}
	if strings.Contains(text.String(), "CASE-9931") {
		t.Error("the text report shows a raw case id")
	}
	for _, hit := range grepDir(t, e.dir, []string{"CASE-9931"}) {
		t.Error(hit)
	}
}
