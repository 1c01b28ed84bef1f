package catalog

import (
	"bytes"
	"compress/gzip"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
)

// snapshotID is the SHA-256 of v's stored manifest bytes; the test also
// checks that they decode to v's manifest.
func (e *env) snapshotID(t testing.TB, v *Version) SnapshotID {
	t.Helper()
	b, err := e.s.ManifestBytes(context.Background(), v)
	if err != nil {
		t.Fatal(err)
	}
	var m Manifest
	if err := json.Unmarshal(b, &m); err != nil || !reflect.DeepEqual(&m, v.Manifest) {
		t.Fatalf("stored manifest decodes to %+v (%v), want %+v", m, err, v.Manifest)
	}
	return sha256.Sum256(b)
}

func TestIngestFirstVersion(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RowGroupRows = 100 })
	ds := e.dataset(t, "er", "visits", nil)
	rows := genRows(genOpt{Seed: 1, N: 500, Shuffle: true, Coarse: true})
	data := csvBytes(header, rows)
	res := e.ingest(t, "er", "visits", data, "/uploads/night-1.csv")

	up := res.Upload
	sum := sha256.Sum256(data)
	if up.Status != UploadAccepted || up.Version != 1 || up.ID != "u1" || up.Seq != 1 || up.Filename != "night-1.csv" ||
		up.Bytes != int64(len(data)) || up.SHA256 != hex.EncodeToString(sum[:]) || up.By != "site-uploader" ||
		!up.ReceivedAt.Equal(testNow) || up.Dataset.String() != "er/visits" || up.Error != nil || up.Report == nil {
		t.Errorf("upload = %+v", up)
	}
	if up.Report.Rows.Total != 500 || up.Report.Rows.Accepted != 500 {
		t.Errorf("report rows = %+v", up.Report.Rows)
	}

	v := res.Version
	m := v.Manifest
	proj, err := e.s.Project(context.Background(), "er")
	if err != nil {
		t.Fatal(err)
	}
	if v.Number != 1 || m.Version != 1 || m.Parent != 0 || m.Dataset.String() != "er/visits" || m.SchemaVersion != schema.Version ||
		m.ProfileHash != ds.ProfileHash || m.ProfileHash != schema.DefaultProfile().Hash() || m.KeyID != proj.Key.ID ||
		m.CreatedBy != "site-uploader" || !m.CreatedAt.Equal(testNow) || m.Rows != 500 || m.Quality == nil ||
		!slices.Equal(m.Uploads, []UploadID{"u1"}) || len(m.Files) != 1 {
		t.Fatalf("manifest = %+v", m)
	}
	if v.SnapshotID != e.snapshotID(t, v) {
		t.Errorf("snapshot id %s is not the SHA-256 of the canonical manifest", v.SnapshotID)
	}
	f := m.Files[0]
	content := e.blobBytes(t, f.SHA256)
	if f.Bytes != int64(len(content)) || f.Rows != 500 || f.Upload != "u1" || f.RowGroup != 100 {
		t.Errorf("file entry = %+v (blob %d bytes)", f, len(content))
	}
	// "PAR1" opens and closes every Parquet file (Apache Parquet format
	// specification, "File format").
	if !bytes.HasPrefix(content, []byte("PAR1")) || !bytes.HasSuffix(content, []byte("PAR1")) {
		t.Error("the snapshot is not framed by PAR1")
	}

	evs := readEvents(t, content)
	if len(evs) != 500 {
		t.Fatalf("read %d events back", len(evs))
	}
	// Expected order: by occurred_at truncated to microseconds, ties by
	// source line (row i is on line i+2).
	type key struct {
		at   time.Time
		line int
	}
	want := make([]key, len(rows))
	for i, r := range rows {
		at, err := time.Parse(time.RFC3339Nano, r[7])
		if err != nil {
			t.Fatal(err)
		}
		want[i] = key{at.Truncate(time.Microsecond), i + 2}
	}
	// Time order; at one instant the events that end something (complete,
	// abandon, departure) first, then source line order.
	closing := func(k key) int {
		switch rows[k.line-2][4] {
		case "complete", "abandon", "departure":
			return 0
		}
		return 1
	}
	slices.SortFunc(want, func(a, b key) int {
		if c := a.at.Compare(b.at); c != 0 {
			return c
		}
		if c := closing(a) - closing(b); c != 0 {
			return c
		}
		return a.line - b.line
	})
	ties := 0
	for i, ev := range evs {
		w := want[i]
		if !ev.OccurredAt.Equal(w.at) {
			t.Fatalf("event %d at %v, want %v", i, ev.OccurredAt, w.at)
		}
		if i > 0 && ev.OccurredAt.Equal(evs[i-1].OccurredAt) {
			ties++
		}
		src := rows[w.line-2]
		if ev.EventID != src[11] || ev.Site != src[0] || string(ev.Type) != src[4] {
			t.Fatalf("event %d = %+v, want the row of line %d %v", i, ev, w.line, src)
		}
		if ev.OccurredAt.Nanosecond()%1000 != 0 {
			t.Fatalf("event %d keeps nanoseconds: %v", i, ev.OccurredAt)
		}
		for _, id := range []struct {
			f        schema.Field
			got, raw string
		}{{schema.FieldCaseID, ev.CaseID, src[1]}, {schema.FieldSubjectID, ev.SubjectID, src[2]}, {schema.FieldResourceID, ev.ResourceID, src[3]}} {
			if id.raw == "" {
				if id.got != "" {
					t.Fatalf("event %d: empty %s became %q", i, id.f, id.got)
				}
				continue
			}
			if len(id.got) != anonymize.PseudonymLen || !anonymize.IsPseudonym(id.got) {
				t.Fatalf("event %d: %s %q is not a pseudonym", i, id.f, id.got)
			}
		}
		if ev.Line != 0 {
			t.Fatalf("event %d carries a source line", i)
		}
	}
	if ties == 0 {
		t.Error("the test file has no tied instants; ties by line are not exercised")
	}
	if !f.MinTime.Equal(evs[0].OccurredAt) || !f.MaxTime.Equal(evs[len(evs)-1].OccurredAt) {
		t.Errorf("file time range %v..%v, events %v..%v", f.MinTime, f.MaxTime, evs[0].OccurredAt, evs[len(evs)-1].OccurredAt)
	}

	// What the server serves: the version as stored, its canonical JSON
	// re-computed, must still hash to the snapshot id.
	got, err := e.s.Version(context.Background(), "er", "visits", 0)
	if err != nil {
		t.Fatal(err)
	}
	if got.SnapshotID != v.SnapshotID || e.snapshotID(t, got) != v.SnapshotID {
		t.Errorf("the stored manifest hashes to %s, want %s", e.snapshotID(t, got), v.SnapshotID)
	}
	if d, _ := e.s.Dataset(context.Background(), "er", "visits"); d.Latest != 1 || d.Uploads != 1 {
		t.Errorf("dataset after ingest = %+v", d)
	}
	// OpenFile serves listed files only.
	r, fe, err := e.s.OpenFile(context.Background(), got, f.SHA256)
	if err != nil {
		t.Fatal(err)
	}
	r.Close()
	if fe.SHA256 != f.SHA256 || fe.Bytes != f.Bytes || fe.Rows != f.Rows || fe.Path != DataPath(f.SHA256) {
		t.Errorf("OpenFile entry = %+v", fe)
	}
	if _, _, err := e.s.OpenFile(context.Background(), got, sha256.Sum256([]byte("x"))); err == nil {
		t.Error("OpenFile of an unlisted blob succeeded")
	}
	e.assertTempEmpty(t)
}

// TestStoredManifestBytes checks that a version's manifest and report are
// the bytes stored at commit: the manifest hashes to the snapshot id, names
// the report by the report's own SHA-256, and a change of state (publish,
// retract) rewrites neither.
func TestStoredManifestBytes(t *testing.T) {
	// The real report of an ingest, through the real store, too: one with
	// rejections, empty optional columns and a nil completeness score.
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { r := 0.5; s.RejectAbove = &r })
	rows := genRows(genOpt{Seed: 9, N: 30, Invalid: 7})
	for i := range rows {
		rows[i][2], rows[i][5], rows[i][6], rows[i][8], rows[i][9], rows[i][10] = "", "", "", "", "", ""
	}
	res := e.ingest(t, "p", "d", csvBytes(header, rows), "a.csv")
	got, err := e.s.Version(context.Background(), "p", "d", 1)
	if err != nil {
		t.Fatal(err)
	}
	if e.snapshotID(t, got) != res.Version.SnapshotID {
		t.Error("stored manifest no longer hashes to its snapshot id")
	}
	ctx := context.Background()
	before, _ := e.s.ManifestBytes(ctx, got)
	rep, err := e.s.QualityReport(ctx, got)
	if err != nil {
		t.Fatal(err)
	}
	if q := got.Manifest.Quality; q == nil || blob.ID(sha256.Sum256(rep)) != q.SHA256 || q.Bytes != int64(len(rep)) || q.SHA256 != got.Quality.SHA256 || *q.Score != *got.Quality.Score {
		t.Errorf("manifest names report %+v, version %+v; stored report has sha256 %x, %d bytes", q, got.Quality, sha256.Sum256(rep), len(rep))
	}
	if bytes.Contains(before, []byte(`"quality":`)) {
		t.Error("the manifest embeds the quality report")
	}
	if _, err := e.s.Retract(ctx, "p", "d", 1, "test", "cur"); err != nil {
		t.Fatal(err)
	}
	after, _ := e.s.ManifestBytes(ctx, got)
	if !bytes.Equal(before, after) {
		t.Error("retracting rewrote the manifest")
	}
}

func TestIngestAppendAndDuplicate(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "er", "visits", nil)
	ctx := context.Background()
	d1 := genCSV(genOpt{Seed: 1, N: 200})
	d2 := genCSV(genOpt{Seed: 2, N: 300})
	r1 := e.ingest(t, "er", "visits", d1, "n1.csv")
	r2 := e.ingest(t, "er", "visits", d2, "n2.csv")
	m := r2.Version.Manifest
	if r2.Version.Number != 2 || m.Parent != 1 || len(m.Files) != 2 || m.Rows != 500 ||
		!slices.Equal(m.Uploads, []UploadID{"u1", "u2"}) || m.Files[0] != r1.Version.Manifest.Files[0] ||
		m.Files[1].Upload != "u2" || m.Files[1].Rows != 300 {
		t.Errorf("version 2 manifest = %+v", m)
	}
	// The version's report covers all its files; the upload's, its own.
	q := e.report(t, r2.Version)
	if q.Rows.Total != 500 || r2.Upload.Report.Rows.Total != 300 || q.Raw.Uploads != 2 {
		t.Errorf("version 2 quality counts %d rows (upload report %d, uploads %d); want 500 over both files and 300",
			q.Rows.Total, r2.Upload.Report.Rows.Total, q.Raw.Uploads)
	}
	if len(e.blobIDs(t)) != 2 {
		t.Errorf("blobs = %v", e.blobIDs(t))
	}

	// The same bytes again: no new version, no new blob.
	r3 := e.ingest(t, "er", "visits", d1, "n1-again.csv")
	if r3.Upload.Status != UploadDuplicate || r3.Upload.Version != 1 || r3.Version == nil || r3.Version.Number != 1 ||
		r3.Version.SnapshotID != r1.Version.SnapshotID || r3.Upload.ID != "u3" || r3.Upload.SHA256 != r1.Upload.SHA256 {
		t.Errorf("duplicate upload = %+v, version %+v", r3.Upload, r3.Version)
	}
	vs, err := e.s.Versions(ctx, "er", "visits")
	if err != nil {
		t.Fatal(err)
	}
	if len(vs) != 2 || vs[0].Number != 1 || vs[1].Number != 2 {
		t.Errorf("versions = %+v", vs)
	}
	if len(e.blobIDs(t)) != 2 {
		t.Errorf("the duplicate wrote a blob: %v", e.blobIDs(t))
	}
	ups, err := e.s.Uploads(ctx, "er", "visits")
	if err != nil {
		t.Fatal(err)
	}
	var st []string
	for _, u := range ups {
		st = append(st, u.ID.String()+":"+string(u.Status))
	}
	if strings.Join(st, ",") != "u1:accepted,u2:accepted,u3:duplicate" {
		t.Errorf("uploads = %v", st)
	}
	if d, _ := e.s.Dataset(ctx, "er", "visits"); d.Latest != 2 || d.Uploads != 3 {
		t.Errorf("dataset = %+v", d)
	}
	// The same rows gzipped are other bytes but the same Parquet file, which
	// the latest version holds already: a duplicate, not a repeated file.
	r4 := e.ingest(t, "er", "visits", gzipBytes(d1), "n1.csv.gz")
	if r4.Upload.Status != UploadDuplicate || r4.Version.Number != 2 {
		t.Errorf("gzipped upload = %+v", r4.Upload)
	}
	e.assertTempEmpty(t)
}

func TestPseudonymScope(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p1", "a", nil)
	e.dataset(t, "p1", "b", nil)
	e.dataset(t, "p2", "a", nil)
	file := func(ev string) []byte {
		return []byte("site,case_id,subject_id,resource_id,event_type,occurred_at,event_id\n" +
			"north,CASE-1,SUBJ-1,RES-1,arrival,2026-03-02T08:00:00Z," + ev + "\n")
	}
	ids := func(p, d, ev string) [3]string {
		res := e.ingest(t, p, d, file(ev), "")
		fs := res.Version.Manifest.Files
		evs := readEvents(t, e.blobBytes(t, fs[len(fs)-1].SHA256))
		return [3]string{evs[0].CaseID, evs[0].SubjectID, evs[0].ResourceID}
	}
	a1 := ids("p1", "a", "e1")
	a2 := ids("p1", "a", "e2") // another upload of the same dataset
	b1 := ids("p1", "b", "e3") // another dataset of the project
	c1 := ids("p2", "a", "e4") // another project
	if a1 != a2 || a1 != b1 {
		t.Errorf("one project, other pseudonyms: %v %v %v", a1, a2, b1)
	}
	for i := range c1 {
		if c1[i] == a1[i] {
			t.Errorf("field %d has the same pseudonym in two projects", i)
		}
	}
	// The three identifier fields are separate domains.
	if a1[0] == a1[1] || a1[1] == a1[2] {
		t.Errorf("fields share pseudonyms: %v", a1)
	}
	// Same master key, reopened store: same pseudonyms.
	e.open(t, nil)
	if a3 := ids("p1", "a", "e5"); a3 != a1 {
		t.Errorf("after reopen: %v, want %v", a3, a1)
	}
}

// TestSameEventsOtherBytes: a re-export of the same events in other bytes
// (gzip, CRLF line ends) makes the same Parquet file, so it is a duplicate
// of the version that holds it, not a version that repeats the file.
func TestSameEventsOtherBytes(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	plain := genCSV(genOpt{Seed: 9, N: 300})
	first := e.ingest(t, "p", "d", plain, "night.csv")
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write(plain)
	zw.Close()
	crlf := bytes.ReplaceAll(plain, []byte("\n"), []byte("\r\n"))
	for name, data := range map[string][]byte{"night.csv.gz": gz.Bytes(), "night-crlf.csv": crlf} {
		for try := 0; try < 2; try++ { // the second try hits the digest at once
			res := e.ingest(t, "p", "d", data, name)
			if res.Upload.Status != UploadDuplicate || res.Version.Number != first.Version.Number {
				t.Errorf("%s (try %d): status %s, version %d; want duplicate of %d", name, try, res.Upload.Status, res.Version.Number, first.Version.Number)
			}
		}
	}
	vs, _ := e.s.Versions(context.Background(), "p", "d")
	if len(vs) != 1 || len(vs[0].Manifest.Files) != 1 {
		t.Errorf("%d versions, latest with %d files; want 1 version with 1 file", len(vs), len(vs[len(vs)-1].Manifest.Files))
	}
}
