package server

import (
	"bytes"
	"encoding/json"
	"net/http"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// TestCurationOverHTTP covers drafts, publication, retraction (410 for
// data, metadata still readable), selectors, upload modes and the admin
// garbage collector through the real echo server on loopback.
func TestCurationOverHTTP(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	r := e.postJSON("/api/v1/projects/ward/datasets", e.admin, map[string]any{"name": "events", "profile": wardProfile, "drafts": true})
	e.mustStatus(r, http.StatusCreated, "create drafts dataset")
	ds := "/api/v1/projects/ward/datasets/events"
	curator, member, partner := e.curator("ward"), e.member("ward"), e.partner("ward/events")

	var up api.UploadResult
	e.decode(e.upload("ward", "events", partner, "d4.csv", wardFile(4, 12)), &up)
	if up.Version == nil || up.Version.State != catalog.StateDraft {
		t.Fatalf("first upload to a drafts dataset: %+v", up.Version)
	}
	e.mustStatus(e.get(ds+"/versions/1", member), http.StatusNotFound, "member reads a draft")
	e.mustStatus(e.get(ds+"/versions/1", curator), http.StatusOK, "curator reads a draft")
	if vs := e.heads("ward", "events", member, 0); len(vs) != 0 {
		t.Fatalf("member lists %d versions, want none (drafts hidden)", len(vs))
	}
	// Nor through the uploads, the trend or the alerts.
	var ups []catalog.Upload
	e.decode(e.get(ds+"/uploads", member), &ups)
	var tr api.Trend
	e.decode(e.get(ds+"/quality/trend", member), &tr)
	if len(ups) != 0 || len(tr.Points) != 0 {
		t.Fatalf("member sees %d uploads and %d trend points of a draft", len(ups), len(tr.Points))
	}
	e.decode(e.get(ds+"/uploads", partner), &ups)
	if len(ups) != 1 {
		t.Fatalf("the partner sees %d of its uploads, want 1", len(ups))
	}
	e.mustStatus(e.postJSON(ds+"/versions/1/publish", member, struct{}{}), http.StatusForbidden, "member publishes")
	e.mustStatus(e.postJSON(ds+"/versions/1/publish", partner, struct{}{}), http.StatusForbidden, "partner publishes")
	e.mustStatus(e.postJSON(ds+"/versions/latest/publish", curator, struct{}{}), http.StatusBadRequest, "publish @latest")
	e.mustStatus(e.postJSON(ds+"/versions/1/frobnicate", curator, struct{}{}), http.StatusNotFound, "unknown action")
	e.mustStatus(e.postJSON(ds+"/versions/1/publish", curator, struct{}{}), http.StatusOK, "publish")
	e.decode(e.get(ds+"/uploads", member), &ups)
	if len(ups) != 1 {
		t.Fatalf("after publication the member sees %d uploads, want 1", len(ups))
	}
	var v1 catalog.Version
	e.decode(e.get(ds+"/versions/latest", member), &v1)
	if v1.Number != 1 || v1.State != catalog.StatePublished || v1.PublishedBy != "curator-ward" {
		t.Fatalf("latest after publication: %+v", v1)
	}
	for sel, want := range map[string]int{
		v1.SnapshotID.String()[:8]: http.StatusOK, "ABCDEF0123": http.StatusNotFound, "abc": http.StatusBadRequest,
		"2999-01-01T00:00:00Z": http.StatusOK, "2000-01-01T00:00:00Z": http.StatusNotFound, "2026-02-30T00:00:00Z": http.StatusBadRequest,
		"0": http.StatusBadRequest, "99": http.StatusNotFound,
	} {
		if r := e.get(ds+"/versions/"+sel, member); r.Status != want {
			t.Errorf("@%s: status %d, want %d: %s", sel, r.Status, want, clipBody(r.Body))
		}
	}

	// Upload modes: bad parameters are refused before the body is read.
	for q, want := range map[string]string{
		"mode=merge":          "upload mode",
		"mode=replace-window": "needs both ends",
		"mode=replace-window&from=2024-03-05T00:00:00Z&to=2024-03-04T00:00:00Z": "is not before",
		"from=2024-03-04T00:00:00Z&to=2024-03-05T00:00:00Z":                     "replace-window only",
		"mode=replace-window&from=yesterday&to=2024-03-05T00:00:00Z":            "RFC 3339",
	} {
		r := e.do(http.MethodPost, ds+"/uploads?"+q, partner, bytes.NewReader(wardFile(4, 12)), nil)
		if r.Status != http.StatusBadRequest || !strings.Contains(e.apiErr(r).Error.Message, want) {
			t.Errorf("upload ?%s: %d %s, want 400 with %q", q, r.Status, clipBody(r.Body), want)
		}
	}
	// Replace day 4 of site ward-3 (times are local, Europe/Amsterdam, UTC+1 in March):
	// a partner token appends only; the curator replaces.
	fixed := []byte(strings.ReplaceAll(string(wardFile(4, 6)), "triage", "review"))
	const rw = "/uploads?mode=replace-window&from=2024-03-03T23:00:00Z&to=2024-03-04T23:00:00Z&site=ward-3"
	e.mustStatus(e.do(http.MethodPost, ds+rw, partner, bytes.NewReader(fixed), nil), http.StatusForbidden, "partner replace-window")
	e.mustStatus(e.do(http.MethodPost, ds+"/uploads?mode=replace-all", partner, bytes.NewReader(wardFile(9, 3)), nil), http.StatusForbidden, "partner replace-all")
	r = e.do(http.MethodPost, ds+rw, curator, bytes.NewReader(fixed), nil)
	e.mustStatus(r, http.StatusCreated, "replace-window")
	e.decode(r, &up)
	l := up.Version.Manifest.Lineage
	if up.Version.Number != 2 || l.Mode != catalog.ModeReplaceWindow || l.RowsRemoved != 12 || up.Version.Manifest.Rows != 6 || up.Version.Manifest.Parent != 1 {
		t.Fatalf("replace-window version: %+v rows %d", l, up.Version.Manifest.Rows)
	}
	r = e.do(http.MethodPost, ds+"/uploads?mode=replace-all", curator, bytes.NewReader(wardFile(9, 3)), nil)
	e.mustStatus(r, http.StatusCreated, "replace-all")

	// Retraction: the data answers 410 with the reason; metadata stays.
	e.mustStatus(e.postJSON(ds+"/versions/1/retract", curator, map[string]string{}), http.StatusBadRequest, "retract without reason")
	e.mustStatus(e.postJSON(ds+"/versions/1/retract", curator, map[string]string{"reason": "wrong ward exported"}), http.StatusOK, "retract")
	e.mustStatus(e.postJSON(ds+"/versions/1/retract", curator, map[string]string{"reason": "again"}), http.StatusConflict, "retract twice")
	e.mustStatus(e.postJSON(ds+"/versions/1/publish", curator, struct{}{}), http.StatusConflict, "publish retracted")
	file := v1.Manifest.Files[0].SHA256.String()
	r = e.get(ds+"/versions/1/files/"+file, member)
	if r.Status != http.StatusGone || !strings.Contains(e.apiErr(r).Error.Message, "wrong ward exported") {
		t.Fatalf("retracted download: %d %s", r.Status, clipBody(r.Body))
	}
	e.mustStatus(e.get(ds+"/versions/1/manifest", member), http.StatusOK, "retracted manifest")
	e.mustStatus(e.get(ds+"/versions/1", member), http.StatusOK, "retracted metadata")
	e.mustStatus(e.get(ds+"/versions/latest", member), http.StatusNotFound, "latest with 1 retracted, 2 and 3 drafts")

	// Garbage collection: admins only; referenced files stay.
	e.mustStatus(e.postJSON("/api/v1/admin/gc", curator, map[string]any{}), http.StatusForbidden, "curator gc")
	e.mustStatus(e.postJSON("/api/v1/admin/gc", e.admin, map[string]any{"grace_seconds": -1}), http.StatusBadRequest, "negative grace")
	r = e.postJSON("/api/v1/admin/gc", e.admin, map[string]any{"grace_seconds": 0})
	e.mustStatus(r, http.StatusOK, "gc")
	var gc catalog.GCResult
	if err := json.Unmarshal(r.Body, &gc); err != nil || len(gc.Deleted) != 0 || gc.Referenced != gc.Blobs || gc.Blobs != 13 { // 3 event files, 3 case tables, the 7 blobs of the latest version's case group
		t.Fatalf("gc: %+v %v", gc, err)
	}
	e.mustStatus(e.get(ds+"/versions/3/files/"+func() string {
		var v catalog.Version
		e.decode(e.get(ds+"/versions/3", curator), &v)
		return v.Manifest.Files[0].SHA256.String()
	}(), curator), http.StatusOK, "download after gc")
}
