package server

import (
	"bytes"
	"fmt"
	"net/http"
	"slices"
	"strings"
	"sync"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// TestUploadTooLarge checks that a body over Config.MaxUploadBytes is
// refused with 413 (RFC 9110 section 15.5.14), stores nothing, and that
// the server serves the next request.
func TestUploadTooLarge(t *testing.T) {
	e := newEnv(t, func(c *Config) { c.MaxUploadBytes = 4 << 10 })
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	big := wardFile(9, 300) // about 25 KiB
	if len(big) <= 4<<10 {
		t.Fatalf("test file is only %d bytes", len(big))
	}
	for _, data := range [][]byte{big, gz(t, wardFile(10, 3000))} {
		r := e.upload("ward", "events", e.admin, "big.csv", data)
		e.mustStatus(r, http.StatusRequestEntityTooLarge, "oversized upload")
		if b := e.apiErr(r); b.Error.Code != "too_large" || !strings.Contains(b.Error.Message, "4096") {
			t.Errorf("error %+v, want too_large naming the limit", b.Error)
		}
	}
	if n := len(e.versions("ward", "events")); n != 0 {
		t.Errorf("%d versions after oversized uploads, want 0", n)
	}
	e.mustStatus(e.upload("ward", "events", e.admin, "small.csv", wardFile(9, 6)), http.StatusCreated, "small upload after")
}

// TestConcurrentUploads sends the same bytes and different files at once:
// the same bytes make one version (the others are duplicates of it), the
// different files make a chain of versions each with its parent's files.
func TestConcurrentUploads(t *testing.T) {
	// One token sends them all: allow it more uploads at once than n.
	e := newEnv(t, func(c *Config) { c.MaxUploadsPerToken = 16 })
	e.createProject("ward")
	e.createDataset("ward", "same", wardProfile)
	e.createDataset("ward", "many", wardProfile)

	const n = 6
	statuses := make([]int, n)
	var wg sync.WaitGroup
	same := wardFile(11, 90)
	for i := range n {
		wg.Go(func() { statuses[i] = e.upload("ward", "same", e.admin, "same.csv", same).Status })
	}
	wg.Wait()
	slices.Sort(statuses)
	want := []int{200, 200, 200, 200, 200, 201}
	if !slices.Equal(statuses, want) {
		t.Errorf("statuses of %d identical uploads %v, want %v", n, statuses, want)
	}
	if vs := e.versions("ward", "same"); len(vs) != 1 {
		t.Errorf("%d versions from identical uploads, want 1", len(vs))
	}
	ups := e.uploads("ward", "same")
	if len(ups) != n {
		t.Errorf("%d uploads recorded, want %d", len(ups), n)
	}

	for i := range n {
		wg.Go(func() {
			r := e.upload("ward", "many", e.admin, "day.csv", wardFile(12+i, 30))
			statuses[i] = r.Status
		})
	}
	wg.Wait()
	for i, s := range statuses {
		if s != http.StatusCreated {
			t.Errorf("upload %d: status %d, want 201", i, s)
		}
	}
	vs := e.versions("ward", "many")
	if len(vs) != n {
		t.Fatalf("%d versions from %d different uploads, want %d", len(vs), n, n)
	}
	for i, v := range vs {
		m := v.Manifest
		if v.Number != i+1 || m.Parent != i || len(m.Files) != i+1 || m.Rows != int64(30*(i+1)) {
			t.Errorf("version %d: number %d parent %d files %d rows %d", i+1, v.Number, m.Parent, len(m.Files), m.Rows)
		}
		if i > 0 && !slices.Equal(m.Files[:i], vs[i-1].Manifest.Files) {
			t.Errorf("version %d does not keep version %d's files", i+1, i)
		}
	}
}

// TestCatalogErrors checks how catalog errors come out over HTTP.
func TestCatalogErrors(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", "")
	cases := []struct {
		name   string
		method string
		path   string
		body   string
		want   int
		code   string
	}{
		{"project exists", "POST", "/api/v1/projects", `{"name":"ward"}`, 409, "exists"},
		{"bad project name", "POST", "/api/v1/projects", `{"name":"Ward One"}`, 400, "invalid"},
		{"project body not JSON", "POST", "/api/v1/projects", `{"name":`, 400, "invalid"},
		{"dataset exists", "POST", "/api/v1/projects/ward/datasets", `{"name":"events"}`, 409, "exists"},
		{"bad dataset name", "POST", "/api/v1/projects/ward/datasets", `{"name":"../x"}`, 400, "invalid"},
		{"reject_above out of range", "POST", "/api/v1/projects/ward/datasets", `{"name":"r","reject_above":1.5}`, 400, "invalid"},
		{"window backwards", "POST", "/api/v1/projects/ward/datasets", `{"name":"w","window_from":"2024-02-01T00:00:00Z","window_to":"2024-01-01T00:00:00Z"}`, 400, "invalid"},
		{"dataset in no project", "POST", "/api/v1/projects/nope/datasets", `{"name":"d"}`, 404, "not_found"},
		{"no such project", "GET", "/api/v1/projects/nope", "", 404, "not_found"},
		{"no such dataset", "GET", "/api/v1/projects/ward/datasets/nope", "", 404, "not_found"},
		{"upload to no dataset", "POST", "/api/v1/projects/ward/datasets/nope/uploads", "a", 404, "not_found"},
		{"no version yet", "GET", "/api/v1/projects/ward/datasets/events/versions/latest", "", 404, "not_found"},
		{"unknown route", "GET", "/api/v1/nothing-here", "", 404, "not_found"},
		{"misspelt dataset field", "POST", "/api/v1/projects/ward/datasets", `{"name":"typo","profil":"format: csv"}`, 400, "invalid"},
		{"misspelt project field", "POST", "/api/v1/projects", `{"name":"typo","titel":"x"}`, 400, "invalid"},
		{"two JSON values", "POST", "/api/v1/projects", `{"name":"two"} {"name":"three"}`, 400, "invalid"},
		{"empty body", "POST", "/api/v1/projects", ``, 400, "invalid"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			e := e.in(t)
			r := e.do(tc.method, tc.path, e.admin, strings.NewReader(tc.body), map[string]string{"Content-Type": "application/json"})
			if r.Status != tc.want {
				t.Fatalf("status %d, want %d; body %s", r.Status, tc.want, clipBody(r.Body))
			}
			if b := e.apiErr(r); b.Error.Code != tc.code {
				t.Errorf("code %q, want %q", b.Error.Code, tc.code)
			}
		})
	}
	var ds []catalog.Dataset
	e.decode(e.get("/api/v1/projects/ward/datasets", e.admin), &ds)
	if len(ds) != 1 {
		t.Errorf("%d datasets after refused creations, want 1", len(ds))
	}
	for _, p := range []string{"typo", "two", "three"} {
		if r := e.get("/api/v1/projects/"+p, e.admin); r.Status != http.StatusNotFound {
			t.Errorf("project %s: status %d after a refused creation, want 404", p, r.Status)
		}
	}

	// An unknown field is named, so the caller sees the typo.
	r := e.postJSON("/api/v1/projects/ward/datasets", e.admin, map[string]string{"name": "typo", "profil": "x"})
	if b := e.apiErr(r); !strings.Contains(b.Error.Message, `"profil"`) {
		t.Errorf("message %q does not name the unknown field", b.Error.Message)
	}
	// A JSON body sent as another media type is refused.
	r = e.do("POST", "/api/v1/projects", e.admin, strings.NewReader(`{"name":"form"}`), map[string]string{"Content-Type": "application/x-www-form-urlencoded"})
	e.mustStatus(r, http.StatusBadRequest, "form-encoded project")
	// And application/json with a charset is fine (RFC 8259 section 11).
	r = e.do("POST", "/api/v1/projects", e.admin, strings.NewReader(`{"name":"cs"}`), map[string]string{"Content-Type": "application/json; charset=utf-8"})
	e.mustStatus(r, http.StatusCreated, "project with charset")
	// A JSON body over the limit is 413, like an oversized upload.
	big := `{"name":"big","title":"` + strings.Repeat("t", 2<<20) + `"}`
	r = e.do("POST", "/api/v1/projects", e.admin, strings.NewReader(big), map[string]string{"Content-Type": "application/json"})
	e.mustStatus(r, http.StatusRequestEntityTooLarge, "2 MiB project body")
}

// TestVersionsPages lists versions a page at a time: every version once,
// in order, each with its scores and none with its manifest or report.
func TestVersionsPages(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "paged", wardProfile)
	for day := 1; day <= 7; day++ {
		e.mustStatus(e.upload("ward", "paged", e.admin, "d.csv", wardFile(day, 9)), http.StatusCreated, "upload")
	}
	ds := "/api/v1/projects/ward/datasets/paged/versions"
	r := e.get(ds+"?limit=3", e.admin)
	e.mustStatus(r, http.StatusOK, "first page")
	var page api.VersionsPage
	e.decode(r, &page)
	if len(page.Versions) != 3 || page.NextAfter == nil || *page.NextAfter != 3 {
		t.Fatalf("first page: %d versions, next_after %v; want 3 and 3", len(page.Versions), page.NextAfter)
	}
	for _, w := range []string{`"manifest"`, `"dimensions"`, `"findings"`, `"raw"`} {
		if bytes.Contains(r.Body, []byte(w)) {
			t.Errorf("the versions list holds %s", w)
		}
	}
	hs := e.heads("ward", "paged", e.admin, 3)
	if len(hs) != 7 {
		t.Fatalf("%d versions over the pages, want 7", len(hs))
	}
	for i, h := range hs {
		var v catalog.Version
		e.decode(e.get(fmt.Sprintf("%s/%d", ds, h.Number), e.admin), &v)
		var q *quality.Report
		e.decode(e.get(fmt.Sprintf("%s/%d/quality", ds, h.Number), e.admin), &q)
		if h.Number != i+1 || h.Quality.Score == nil || q == nil || *h.Quality.Score != *q.Score || h.Rows != v.Manifest.Rows || h.Files != len(v.Manifest.Files) || h.Mode != catalog.ModeAppend || h.Events == nil || h.Events.New != v.Manifest.Lineage.Events.New {
			t.Errorf("head %d: %+v; version's score %v rows %d files %d", i, h, q.Score, v.Manifest.Rows, len(v.Manifest.Files))
		}
		for _, d := range q.Dimensions {
			if s, ok := h.Scores[d.Name]; !ok || (s == nil) != (d.Score == nil) || s != nil && *s != *d.Score {
				t.Errorf("head %d: score of %s %v, want %v", h.Number, d.Name, s, d.Score)
			}
		}
	}
	for q, want := range map[string]string{
		"?limit=0":         `limit "0"`,
		"?limit=5000":      `limit "5000"`,
		"?after=x":         `after "x"`,
		"?limit=2&limit=3": `"limit" given 2 times`,
		"?page=2":          `unknown parameter "page"`,
	} {
		r := e.get(ds+q, e.admin)
		if r.Status != http.StatusBadRequest || !strings.Contains(e.apiErr(r).Error.Message, want) {
			t.Errorf("%s: status %d body %s; want 400 naming %s", q, r.Status, clipBody(r.Body), want)
		}
	}
}
