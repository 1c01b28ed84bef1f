package server

import (
	"encoding/json"
	"net/http"
	"slices"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/server/api"
)

// TestOpenAPIRoutes checks that every route echo registers for the API is
// an operation of the served document, and every operation of the
// document a route: the pages for people (HTML) and the catch-all are
// the only routes left out.
func TestOpenAPIRoutes(t *testing.T) {
	e := newEnv(t)
	r := e.get(OpenAPIPath, "")
	e.mustStatus(r, http.StatusOK, "openapi.json")
	var doc struct {
		OpenAPI string                                `json:"openapi"`
		Paths   map[string]map[string]json.RawMessage `json:"paths"`
	}
	e.decode(r, &doc)
	if doc.OpenAPI != "3.1.0" {
		t.Fatalf("openapi %q, want 3.1.0", doc.OpenAPI)
	}
	pages := map[string]bool{}
	for _, rt := range e.server.routes {
		if rt.page {
			pages[rt.method+" "+rt.path] = true
		}
	}
	var registered, documented []string
	for _, rt := range e.server.echo.Routes() {
		key := rt.Method + " " + rt.Path
		if pages[key] || rt.Path == "/*" {
			continue
		}
		registered = append(registered, rt.Method+" "+api.OpenAPIPath(rt.Path))
	}
	for path, item := range doc.Paths {
		for method := range item {
			documented = append(documented, strings.ToUpper(method)+" "+path)
		}
	}
	slices.Sort(registered)
	registered = slices.Compact(registered)
	slices.Sort(documented)
	for _, k := range registered {
		if !slices.Contains(documented, k) {
			t.Errorf("route %s is not in the OpenAPI document", k)
		}
	}
	for _, k := range documented {
		if !slices.Contains(registered, k) {
			t.Errorf("the OpenAPI document lists %s, which no route serves", k)
		}
	}
	if len(registered) < 50 {
		t.Errorf("only %d API routes registered: the route list was not read", len(registered))
	}
}

// TestOpenAPICheckFails checks that the validation the test helpers run
// on every answer refuses answers the document does not describe: a
// member of the wrong type, a member no type declares, a status not
// listed, an error that is not problem details.
func TestOpenAPICheckFails(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	good := e.get("/api/v1/projects/ward", e.admin)
	e.mustStatus(good, http.StatusOK, "get project")
	req, err := http.NewRequest(http.MethodGet, e.srv.URL+"/api/v1/projects/ward", nil)
	if err != nil {
		t.Fatal(err)
	}
	answer := func(status int, ct, body string) (*http.Response, []byte) {
		return &http.Response{StatusCode: status, Header: http.Header{"Content-Type": {ct}}}, []byte(body)
	}
	if res, b := answer(http.StatusOK, "application/json", string(good.Body)); e.openapi.validate(req, res, b) != nil {
		t.Fatalf("the server's own answer is refused: %v", e.openapi.validate(req, res, b))
	}
	for _, c := range []struct {
		name, ct, body string
		status         int
	}{
		{"wrong type", "application/json", `{"name": 7, "created_at": "2026-03-01T00:00:00Z", "created_by": "a", "pseudonym_key_id": "k"}`, 200},
		{"undeclared member", "application/json", `{"name": "ward", "created_at": "2026-03-01T00:00:00Z", "created_by": "a", "pseudonym_key_id": "k", "sealed_key": "x"}`, 200},
		{"missing member", "application/json", `{"name": "ward"}`, 200},
		{"status not listed", "application/json", string(good.Body), 201},
		{"error not problem details", "application/json", `{"error": {"status": 404, "code": "not_found", "message": "no"}}`, 404},
		{"problem without detail", "application/problem+json", `{"type": "about:blank", "title": "Not Found", "status": 404, "code": "not_found", "error": {"status": 404, "code": "not_found", "message": "no"}}`, 404},
	} {
		res, b := answer(c.status, c.ct, c.body)
		if err := e.openapi.validate(req, res, b); err == nil {
			t.Errorf("%s: accepted", c.name)
		}
	}
	// Requests: the body of a project's creation.
	post, err := http.NewRequest(http.MethodPost, e.srv.URL+"/api/v1/projects", nil)
	if err != nil {
		t.Fatal(err)
	}
	post.Header.Set("Content-Type", "application/json")
	if err := e.openapi.validateRequest(post, []byte(`{"name": "ward2"}`)); err != nil {
		t.Fatalf("a request the server takes is refused: %v", err)
	}
	for name, body := range map[string]string{
		"missing member":    `{"title": "no name"}`,
		"wrong type":        `{"name": 7}`,
		"undeclared member": `{"name": "ward2", "owner": "x"}`,
	} {
		if e.openapi.validateRequest(post, []byte(body)) == nil {
			t.Errorf("request with a %s: accepted", name)
		}
	}
}

// TestProblemDetails checks an error answer against RFC 9457: the media
// type application/problem+json (section 3), the members type, title,
// status and detail (section 3.1; "about:blank" with the status phrase as
// title, section 4.2.1), and the members answers had before kept as
// extensions.
func TestProblemDetails(t *testing.T) {
	e := newEnv(t)
	r := e.get("/api/v1/projects/nowhere", e.admin)
	e.mustStatus(r, http.StatusNotFound, "missing project")
	if ct := r.Header.Get("Content-Type"); ct != "application/problem+json" {
		t.Errorf("Content-Type %q, want application/problem+json", ct)
	}
	var p api.Problem
	e.decode(r, &p)
	if p.Type != "about:blank" || p.Title != "Not Found" || p.Status != 404 || p.Detail == "" || p.Code != "not_found" {
		t.Errorf("problem %+v: want about:blank, Not Found, 404, a detail, code not_found", p)
	}
	old := e.apiErr(r) // the "error" member, as before
	if old.Error.Message != p.Detail || old.Error.Code != p.Code {
		t.Errorf("error member %+v does not repeat the problem %+v", old.Error, p)
	}
}
