package server

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"net/http"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// TestUploadSemantics walks one dataset through a first version, a
// duplicate, an appended second version, a failed and a rejected upload,
// and checks every read route agrees.
func TestUploadSemantics(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	partner := e.partner("ward/events")
	ds := "/api/v1/projects/ward/datasets/events"

	if r := e.get(ds+"/versions/latest", e.admin); r.Status != http.StatusNotFound {
		t.Errorf("latest of an empty dataset: status %d, want 404", r.Status)
	}

	first := wardFile(4, 12)
	r := e.upload("ward", "events", partner, "day4.csv", first)
	e.mustStatus(r, http.StatusCreated, "first upload")
	var up1 api.UploadResult
	e.decode(r, &up1)
	sum := sha256.Sum256(first)
	if up1.Upload.Status != catalog.UploadAccepted || up1.Version == nil || up1.Version.Number != 1 ||
		up1.Upload.Version != 1 || up1.Upload.SHA256 != hex.EncodeToString(sum[:]) || up1.Upload.Bytes != int64(len(first)) {
		t.Fatalf("first upload = %+v, want accepted version 1 with the file's sha256 and size", up1)
	}
	if up1.Version.Manifest.Rows != 12 || len(up1.Version.Manifest.Files) != 1 || up1.Version.Manifest.Parent != 0 {
		t.Errorf("version 1 manifest = %+v, want 12 rows in 1 file, no parent", up1.Version.Manifest)
	}

	// The same bytes again: no new version, answer 200 duplicate.
	r = e.upload("ward", "events", partner, "day4-again.csv", first)
	e.mustStatus(r, http.StatusOK, "duplicate upload")
	var dup api.UploadResult
	e.decode(r, &dup)
	if dup.Upload.Status != catalog.UploadDuplicate || dup.Version == nil || dup.Version.Number != 1 || dup.Upload.Version != 1 {
		t.Errorf("duplicate = %+v, want status duplicate of version 1", dup)
	}
	if dup.Version != nil && dup.Version.SnapshotID != up1.Version.SnapshotID {
		t.Errorf("duplicate names snapshot %s, want %s", dup.Version.SnapshotID, up1.Version.SnapshotID)
	}
	if n := len(e.versions("ward", "events")); n != 1 {
		t.Errorf("%d versions after a duplicate, want 1", n)
	}

	// A different file appends.
	second := wardFile(5, 9)
	r = e.upload("ward", "events", partner, "day5.csv", second)
	e.mustStatus(r, http.StatusCreated, "second upload")
	var up2 api.UploadResult
	e.decode(r, &up2)
	v2 := up2.Version
	if v2 == nil || v2.Number != 2 || v2.Manifest.Parent != 1 || len(v2.Manifest.Files) != 2 || v2.Manifest.Rows != 21 {
		t.Fatalf("second upload made %+v, want version 2, parent 1, 2 files, 21 rows", v2)
	}
	if v2.Manifest.Files[0] != up1.Version.Manifest.Files[0] {
		t.Errorf("version 2's first file %+v is not version 1's %+v", v2.Manifest.Files[0], up1.Version.Manifest.Files[0])
	}
	if got := v2.Manifest.Uploads; len(got) != 2 || got[0] != up1.Upload.ID || got[1] != up2.Upload.ID {
		t.Errorf("version 2 uploads %v, want [%s %s]", got, up1.Upload.ID, up2.Upload.ID)
	}
	for _, f := range v2.Manifest.Files {
		if f.Rows <= 0 || f.Bytes <= 0 || f.MinTime.After(f.MaxTime) || f.SHA256.IsZero() {
			t.Errorf("file entry %+v is incomplete", f)
		}
	}

	// latest and /2 agree, with each other and with the upload's answer.
	var latest, byNumber catalog.Version
	r = e.get(ds+"/versions/latest", e.admin)
	e.mustStatus(r, http.StatusOK, "latest")
	e.decode(r, &latest)
	r = e.get(ds+"/versions/2", e.admin)
	e.mustStatus(r, http.StatusOK, "version 2")
	e.decode(r, &byNumber)
	lj, _ := json.Marshal(latest)
	bj, _ := json.Marshal(byNumber)
	uj, _ := json.Marshal(v2)
	if !bytes.Equal(lj, bj) || !bytes.Equal(lj, uj) {
		t.Errorf("latest, /versions/2 and the upload's version differ:\n%s\n%s\n%s", lj, bj, uj)
	}
	if d := e.dataset("ward", "events"); d.Latest != 2 {
		t.Errorf("dataset latest_version %d, want 2", d.Latest)
	}

	// The manifest's bytes hash to the snapshot id.
	for _, v := range []catalog.Version{*up1.Version, *v2} {
		r = e.get(fmt.Sprintf("%s/versions/%d/manifest", ds, v.Number), e.admin)
		e.mustStatus(r, http.StatusOK, "manifest")
		s := sha256.Sum256(r.Body)
		if hex.EncodeToString(s[:]) != v.SnapshotID.String() {
			t.Errorf("version %d: sha256 of the manifest bytes is %x, snapshot_id %s", v.Number, s, v.SnapshotID)
		}
		if et := r.Header.Get("ETag"); et != `"`+v.SnapshotID.String()+`"` {
			t.Errorf("manifest ETag %q", et)
		}
		var m catalog.Manifest
		e.decode(r, &m)
		if m.Version != v.Number || m.Dataset.String() != "ward/events" || m.KeyID == "" || m.SchemaVersion == "" {
			t.Errorf("manifest %+v", m)
		}
	}

	// The quality endpoint returns version 2's report, over both files.
	r = e.get(ds+"/versions/2/quality", e.admin)
	e.mustStatus(r, http.StatusOK, "quality")
	var rep quality.Report
	e.decode(r, &rep)
	if rep.Score == nil || rep.Rows.Total != 21 || rep.Rows.Accepted != 21 || rep.Dimension("accuracy") == nil {
		t.Errorf("quality report rows %+v, want the 12 + 9 rows of both uploads, with a score", rep.Rows)
	}
	// Served as stored: the bytes the manifest names by their sha256.
	if q := v2.Manifest.Quality; q == nil || sha256.Sum256(r.Body) != q.SHA256 || int64(len(r.Body)) != q.Bytes {
		t.Errorf("quality endpoint's bytes are not the report the manifest names (%+v)", q)
	}

	// A failed and a rejected upload, for the uploads list.
	e.mustStatus(e.upload("ward", "events", partner, "empty.csv", nil), http.StatusBadRequest, "empty upload")
	allBad := strings.ReplaceAll(string(wardFile(6, 6)), ";triage;DONE;", ";triage;NOPE;")
	allBad = strings.ReplaceAll(strings.ReplaceAll(allBad, ";triage;REG;", ";triage;NOPE;"), ";triage;BEGIN;", ";triage;NOPE;")
	e.mustStatus(e.upload("ward", "events", partner, "bad.csv", []byte(allBad)), http.StatusUnprocessableEntity, "rejected upload")

	ups := e.uploads("ward", "events")
	want := []struct {
		status  catalog.UploadStatus
		version int
		file    string
	}{
		{catalog.UploadAccepted, 1, "day4.csv"},
		{catalog.UploadDuplicate, 1, "day4-again.csv"},
		{catalog.UploadAccepted, 2, "day5.csv"},
		{catalog.UploadFailed, 0, "empty.csv"},
		{catalog.UploadRejected, 0, "bad.csv"},
	}
	if len(ups) != len(want) {
		t.Fatalf("%d uploads listed, want %d: %+v", len(ups), len(want), ups)
	}
	for i, w := range want {
		u := ups[i]
		if u.Status != w.status || u.Version != w.version || u.Filename != w.file || u.Seq != i+1 || u.By != "partner-site" {
			t.Errorf("upload %d = %+v, want %s version %d file %s", i+1, u, w.status, w.version, w.file)
		}
	}
	if ups[3].Error == nil || ups[3].Error.Rule != "empty_file" {
		t.Errorf("failed upload's error %+v, want rule empty_file", ups[3].Error)
	}
	if ups[4].Report == nil || ups[4].Report.Rows.Rejected != 6 {
		t.Errorf("rejected upload's report %+v, want 6 rejected rows", ups[4].Report)
	}
	if d := e.dataset("ward", "events"); d.Uploads != 5 || d.Latest != 2 {
		t.Errorf("dataset counts uploads %d latest %d, want 5 and 2", d.Uploads, d.Latest)
	}
}

// TestDownload checks the file route: length, ETag, body digest, byte
// ranges (RFC 9110 section 14), conditional requests (RFC 9110 section
// 13.1.2) and the errors of bad version and file ids.
func TestDownload(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	e.mustStatus(e.upload("ward", "events", e.admin, "a.csv", wardFile(7, 60)), http.StatusCreated, "upload 1")
	r := e.upload("ward", "events", e.admin, "b.csv", wardFile(8, 60))
	e.mustStatus(r, http.StatusCreated, "upload 2")
	var res api.UploadResult
	e.decode(r, &res)
	v2 := res.Version
	member := e.member("ward")
	ds := "/api/v1/projects/ward/datasets/events"

	for _, f := range v2.Manifest.Files {
		id := f.SHA256.String()
		path := fmt.Sprintf("%s/versions/2/files/%s", ds, id)
		r := e.get(path, member)
		e.mustStatus(r, http.StatusOK, "download")
		if cl := r.Header.Get("Content-Length"); cl != fmt.Sprint(f.Bytes) || int64(len(r.Body)) != f.Bytes {
			t.Errorf("Content-Length %q, body %d bytes, manifest %d", cl, len(r.Body), f.Bytes)
		}
		etag := `"` + id + `"`
		if got := r.Header.Get("ETag"); got != etag {
			t.Errorf("ETag %q, want %q", got, etag)
		}
		if s := sha256.Sum256(r.Body); hex.EncodeToString(s[:]) != id {
			t.Errorf("body sha256 %x, want %s", s, id)
		}
		if !bytes.HasPrefix(r.Body, []byte("PAR1")) || !bytes.HasSuffix(r.Body, []byte("PAR1")) {
			t.Errorf("body is not a Parquet file (no PAR1 magic, Apache Parquet format spec)")
		}
		if ct := r.Header.Get("Content-Type"); ct != "application/vnd.apache.parquet" {
			t.Errorf("Content-Type %q", ct)
		}
		whole := r.Body

		// HEAD tells the size without the body (a resuming client asks).
		hr := e.do(http.MethodHead, path, member, nil, nil)
		e.mustStatus(hr, http.StatusOK, "head")
		if cl := hr.Header.Get("Content-Length"); cl != fmt.Sprint(f.Bytes) || len(hr.Body) != 0 {
			t.Errorf("HEAD: Content-Length %q, %d body bytes", cl, len(hr.Body))
		}

		rr := e.do(http.MethodGet, path, member, nil, map[string]string{"Range": "bytes=100-199"})
		e.mustStatus(rr, http.StatusPartialContent, "range")
		if !bytes.Equal(rr.Body, whole[100:200]) {
			t.Errorf("range body differs from bytes 100-199 of the file")
		}
		if cr := rr.Header.Get("Content-Range"); cr != fmt.Sprintf("bytes 100-199/%d", f.Bytes) {
			t.Errorf("Content-Range %q", cr)
		}
		rr = e.do(http.MethodGet, path, member, nil, map[string]string{"Range": fmt.Sprintf("bytes=%d-", f.Bytes+10)})
		e.mustStatus(rr, http.StatusRequestedRangeNotSatisfiable, "range past the end")

		nm := e.do(http.MethodGet, path, member, nil, map[string]string{"If-None-Match": etag})
		e.mustStatus(nm, http.StatusNotModified, "If-None-Match")
		if len(nm.Body) != 0 {
			t.Errorf("304 has a body of %d bytes", len(nm.Body))
		}
		nm = e.do(http.MethodGet, path, member, nil, map[string]string{"If-None-Match": `"something-else"`})
		e.mustStatus(nm, http.StatusOK, "If-None-Match with another tag")
	}

	v1File := v2.Manifest.Files[0].SHA256.String()
	v2Only := v2.Manifest.Files[1].SHA256.String()
	cases := []struct {
		name string
		path string
		want int
	}{
		{"version 1's file in version 1", "/versions/1/files/" + v1File, 200},
		{"latest", "/versions/latest/files/" + v2Only, 200},
		{"file not in that version", "/versions/1/files/" + v2Only, 404},
		{"unknown file id", "/versions/2/files/" + strings.Repeat("ab", 32), 404},
		{"malformed id", "/versions/2/files/not-a-digest", 400},
		{"id one digit short", "/versions/2/files/" + v2Only[:63], 400},
		{"version 99", "/versions/99/files/" + v2Only, 404},
		{"version abc", "/versions/abc/files/" + v2Only, 400},
		{"version 0", "/versions/0/files/" + v2Only, 400},
		{"version -1", "/versions/-1", 400},
		{"version 2^32+1", "/versions/4294967297", 404}, // ten digits: a snapshot prefix, never version 1 by wrapping
		{"version 99 metadata", "/versions/99", 404},
		{"unknown dataset", "/../nope/versions/1", 404},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			e := e.in(t)
			path := ds + tc.path
			if strings.HasPrefix(tc.path, "/../") {
				path = "/api/v1/projects/ward/datasets/" + strings.TrimPrefix(tc.path, "/../")
			}
			r := e.get(path, member)
			if r.Status != tc.want {
				t.Fatalf("status %d, want %d; body %s", r.Status, tc.want, clipBody(r.Body))
			}
			if tc.want >= 400 {
				e.apiErr(r)
			}
		})
	}
}
