package server

import (
	"fmt"
	"net/http"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog/export"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// TestXESOverHTTP: a version exported as XES uploads again to a dataset
// whose profile reads XES, to as many events; XML tricks and broken XES
// get 400 naming rule and line, store nothing, and the server goes on.
func TestXESOverHTTP(t *testing.T) {
	e := newEnv(t)
	e.createProject("clinic")
	e.createDataset("clinic", "visits", "")
	e.createDataset("clinic", "visits-xes", export.XESProfile)
	var b strings.Builder
	b.WriteString("site,case_id,event_type,activity,occurred_at,resource_id\n")
	for i := range 40 {
		fmt.Fprintf(&b, "north,C%d,arrival,,2026-03-02T08:%02d:00Z,\n", i/4, i)
		fmt.Fprintf(&b, "north,C%d,start,consult <a&b>,2026-03-02T09:%02d:00Z,R%d\n", i/4, i, i%3)
	}
	r := e.upload("clinic", "visits", e.partner("clinic/visits"), "night.csv", []byte(b.String()))
	e.mustStatus(r, http.StatusCreated, "csv upload")

	member := e.member("clinic")
	x := e.get("/api/v1/projects/clinic/datasets/visits/versions/1/export?format=xes", member)
	e.mustStatus(x, http.StatusOK, "xes export")
	if ct := x.Header.Get("Content-Type"); !strings.HasPrefix(ct, "application/xml") {
		t.Errorf("Content-Type %q", ct)
	}
	if cd := x.Header.Get("Content-Disposition"); !strings.Contains(cd, ".xes") {
		t.Errorf("Content-Disposition %q", cd)
	}
	if n := strings.Count(string(x.Body), "<trace>"); n != 10 {
		t.Errorf("%d traces, want 10 cases", n)
	}
	r = e.upload("clinic", "visits-xes", e.partner("clinic/visits-xes"), "visits.xes", x.Body)
	e.mustStatus(r, http.StatusCreated, "xes upload")
	var res api.UploadResult
	e.decode(r, &res)
	if res.Version == nil || res.Version.Rows != 80 {
		t.Errorf("xes upload made %+v, want 80 rows", res.Version)
	}
	if r := e.get("/api/v1/projects/clinic/datasets/visits/versions/1/export?format=xes&columns=site", member); r.Status != http.StatusBadRequest {
		t.Errorf("columns with xes: %d", r.Status)
	}

	bad := []struct {
		name, doc, rule string
		line            int64
	}{
		{"entities", "<?xml version=\"1.0\"?>\n<!DOCTYPE log [<!ENTITY x \"y\">]>\n<log/>", "xml_doctype", 2},
		{"bad-int", "<log>\n<trace><string key=\"concept:name\" value=\"c\"/>\n<event><int key=\"n\" value=\"x\"/></event></trace></log>", "xes_value", 3},
		{"broken", "<log>\n<trace>\n</log>", "syntax", 3},
	}
	for _, c := range bad {
		r := e.upload("clinic", "visits-xes", e.partner("clinic/visits-xes"), c.name+".xes", []byte(c.doc))
		if r.Status != http.StatusBadRequest {
			t.Fatalf("%s: status %d %s", c.name, r.Status, clipBody(r.Body))
		}
		ae := e.apiErr(r)
		if ae.Error.Rule != c.rule || ae.Error.Line != c.line {
			t.Errorf("%s: rule %q line %d (%s), want %s line %d", c.name, ae.Error.Rule, ae.Error.Line, ae.Error.Message, c.rule, c.line)
		}
	}
	if vs := e.versions("clinic", "visits-xes"); len(vs) != 1 {
		t.Errorf("%d versions after the refused files, want 1", len(vs))
	}
}
