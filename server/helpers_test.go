package server

import (
	"bytes"
	"context"
	"crypto/rand"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// testIssuer is the iss claim of the test authority's tokens.
const testIssuer = "flowcat-test"

// lockedBuffer is a bytes.Buffer safe for the server's concurrent log
// writes.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) Bytes() []byte {
	l.mu.Lock()
	defer l.mu.Unlock()
	return bytes.Clone(l.b.Bytes())
}

// testEnv is a real server over a real catalog in a temporary folder,
// listening on loopback.
type testEnv struct {
	t       *testing.T
	dir     string
	key     []byte
	auth    *Authority
	store   *catalog.Store
	srv     *httptest.Server
	server  *Server
	log     *lockedBuffer
	rec     *recorder
	admin   string // an admin token
	timeout time.Duration
	openapi *openAPICheck // validates every answer do receives
}

// recorder keeps every response body the helpers received.
type recorder struct {
	mu     sync.Mutex
	bodies [][]byte
}

// in returns a view of e whose helpers report to t (a subtest), sharing
// the server and the recorded bodies.
func (e *testEnv) in(t *testing.T) *testEnv {
	c := *e
	c.t = t
	return &c
}

// newEnv builds the data store (bbolt metadata, local blob folder, temp
// folder) under t.TempDir(), an Authority with a random key, and serves
// server.New over httptest.NewServer. Everything is closed by t.Cleanup.
// Each opt may change the server's Config before New.
func newEnv(t *testing.T, opts ...func(*Config)) *testEnv {
	t.Helper()
	return newEnvAt(t, t.TempDir(), opts...)
}

// newEnvAt is newEnv with the data folder dir.
func newEnvAt(t *testing.T, dir string, opts ...func(*Config)) *testEnv {
	t.Helper()
	return newEnvStore(t, dir, catalog.Options{}, opts...)
}

// newEnvStore is newEnvAt with the catalog options sopt (Master, TempDir
// and Logger are set here).
func newEnvStore(t *testing.T, dir string, sopt catalog.Options, opts ...func(*Config)) *testEnv {
	t.Helper()
	blobs, err := localfs.New(filepath.Join(dir, "blobs"))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(filepath.Join(dir, "tmp"), 0o700); err != nil {
		t.Fatal(err)
	}
	master, err := anonymize.GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	logs := &lockedBuffer{}
	logger := slog.New(slog.NewJSONHandler(logs, &slog.HandlerOptions{Level: slog.LevelDebug}))
	sopt.Master, sopt.TempDir, sopt.Logger = master, filepath.Join(dir, "tmp"), logger
	store, err := catalog.Open(filepath.Join(dir, "catalog.db"), blobs, sopt)
	if err != nil {
		t.Fatal(err)
	}
	key := make([]byte, 32)
	if _, err := rand.Read(key); err != nil {
		t.Fatal(err)
	}
	auth := NewAuthority(key, testIssuer)
	// No rate limit unless a test sets one: tests send many requests fast.
	cfg := Config{Store: store, Authority: auth, Logger: logger, RateLimit: -1}
	for _, o := range opts {
		o(&cfg)
	}
	s := New(cfg)
	// The server as serve runs it (timeouts, the connection in each
	// request's context), on a test listener.
	srv := httptest.NewUnstartedServer(s)
	srv.Config = s.HTTPServer("")
	srv.Listener = Listener(srv.Listener)
	srv.Start()
	e := &testEnv{t: t, dir: dir, key: key, auth: auth, store: store, srv: srv, server: s, log: logs, rec: &recorder{}, timeout: 30 * time.Second,
		openapi: loadOpenAPI(t, s.openapi)}
	t.Cleanup(func() {
		srv.Close()
		store.Close()
	})
	e.admin = e.token(Grant{Role: RoleAdmin, Subject: "admin-1"})
	return e
}

// token issues a token for g under the env's authority (TTL 1 h unless set).
func (e *testEnv) token(g Grant) string {
	e.t.Helper()
	if g.TTL == 0 {
		g.TTL = time.Hour
	}
	tok, err := e.auth.IssueRecorded(context.Background(), e.store, "test", g)
	if err != nil {
		e.t.Fatal(err)
	}
	return tok
}

func (e *testEnv) curator(project string) string {
	return e.token(Grant{Role: RoleCurator, Subject: "curator-" + project, Project: project})
}

func (e *testEnv) member(project string) string {
	return e.token(Grant{Role: RoleMember, Subject: "member-" + project, Project: project})
}

func (e *testEnv) partner(datasets ...string) string {
	return e.token(Grant{Role: RolePartner, Subject: "partner-site", Datasets: datasets})
}

// response is one answer of the server, its body read whole (test bodies
// are small; downloads of the large file read it into memory too, which is
// fine for a test).
type response struct {
	Status int
	Header http.Header
	Body   []byte
}

// do sends one request with a plain net/http client. token "" sends no
// Authorization header; hdr adds headers.
func (e *testEnv) do(method, path, token string, body io.Reader, hdr map[string]string) response {
	e.t.Helper()
	// A JSON body is kept, so that the request can be checked against
	// the document once the server has taken it.
	var sent []byte
	if hdr["Content-Type"] == "application/json" && body != nil {
		b, err := io.ReadAll(body)
		if err != nil {
			e.t.Fatal(err)
		}
		sent, body = b, bytes.NewReader(b)
	}
	req, err := http.NewRequest(method, e.srv.URL+path, body)
	if err != nil {
		e.t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	for k, v := range hdr {
		req.Header.Set(k, v)
	}
	cl := &http.Client{Timeout: e.timeout}
	res, err := cl.Do(req)
	if err != nil {
		e.t.Fatalf("%s %s: %v", method, path, err)
	}
	defer res.Body.Close()
	b, err := io.ReadAll(res.Body)
	if err != nil {
		e.t.Fatalf("%s %s: reading body: %v", method, path, err)
	}
	e.rec.mu.Lock()
	e.rec.bodies = append(e.rec.bodies, b)
	e.rec.mu.Unlock()
	e.openapi.check(e.t, req, res, b)
	if sent != nil && res.StatusCode/100 == 2 {
		e.openapi.checkRequest(e.t, req, sent)
	}
	return response{Status: res.StatusCode, Header: res.Header, Body: b}
}

func (e *testEnv) get(path, token string) response {
	return e.do(http.MethodGet, path, token, nil, nil)
}

func (e *testEnv) postJSON(path, token string, v any) response {
	e.t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		e.t.Fatal(err)
	}
	return e.do(http.MethodPost, path, token, bytes.NewReader(b), map[string]string{"Content-Type": "application/json"})
}

// upload posts data as an upload to project/dataset.
func (e *testEnv) upload(project, dataset, token, filename string, data []byte) response {
	e.t.Helper()
	return e.do(http.MethodPost, fmt.Sprintf("/api/v1/projects/%s/datasets/%s/uploads?filename=%s", project, dataset, filename),
		token, bytes.NewReader(data), map[string]string{"Content-Type": "application/octet-stream"})
}

// mustStatus fails the test unless r has status want.
func (e *testEnv) mustStatus(r response, want int, what string) {
	e.t.Helper()
	if r.Status != want {
		e.t.Fatalf("%s: status %d, want %d; body: %s", what, r.Status, want, clipBody(r.Body))
	}
}

// decode unmarshals r's body into v, failing the test on error.
func (e *testEnv) decode(r response, v any) {
	e.t.Helper()
	if err := json.Unmarshal(r.Body, v); err != nil {
		e.t.Fatalf("body is not the JSON expected: %v; body: %s", err, clipBody(r.Body))
	}
}

// createProject makes a project as admin.
func (e *testEnv) createProject(name string) {
	e.t.Helper()
	r := e.postJSON("/api/v1/projects", e.admin, map[string]string{"name": name, "title": "Project " + name})
	e.mustStatus(r, http.StatusCreated, "create project "+name)
}

// createDataset makes a dataset as admin with the given YAML profile.
func (e *testEnv) createDataset(project, name, profile string) {
	e.t.Helper()
	r := e.postJSON("/api/v1/projects/"+project+"/datasets", e.admin, map[string]any{"name": name, "profile": profile})
	e.mustStatus(r, http.StatusCreated, "create dataset "+project+"/"+name)
}

// heads lists a dataset's versions as token sees them, following the
// pages of size limit (0: the server's default).
func (e *testEnv) heads(project, dataset, token string, limit int) []catalog.Version {
	e.t.Helper()
	out := []catalog.Version{}
	after := 0
	for {
		q := fmt.Sprintf("?after=%d", after)
		if limit > 0 {
			q += fmt.Sprintf("&limit=%d", limit)
		}
		r := e.get("/api/v1/projects/"+project+"/datasets/"+dataset+"/versions"+q, token)
		e.mustStatus(r, http.StatusOK, "list versions")
		var page api.VersionsPage
		e.decode(r, &page)
		out = append(out, page.Versions...)
		if page.NextAfter == nil {
			return out
		}
		if *page.NextAfter <= after {
			e.t.Fatalf("next_after %d does not move past %d", *page.NextAfter, after)
		}
		after = *page.NextAfter
	}
}

// versions lists a dataset's versions as admin, whole.
func (e *testEnv) versions(project, dataset string) []catalog.Version {
	e.t.Helper()
	var vs []catalog.Version
	for _, h := range e.heads(project, dataset, e.admin, 0) {
		r := e.get(fmt.Sprintf("/api/v1/projects/%s/datasets/%s/versions/%d", project, dataset, h.Number), e.admin)
		e.mustStatus(r, http.StatusOK, "get version")
		var v catalog.Version
		e.decode(r, &v)
		vs = append(vs, v)
	}
	return vs
}

// dataset reads a dataset's metadata as admin.
func (e *testEnv) dataset(project, dataset string) catalog.Dataset {
	e.t.Helper()
	r := e.get("/api/v1/projects/"+project+"/datasets/"+dataset, e.admin)
	e.mustStatus(r, http.StatusOK, "get dataset")
	var d catalog.Dataset
	e.decode(r, &d)
	return d
}

// uploads lists a dataset's uploads as admin.
func (e *testEnv) uploads(project, dataset string) []catalog.Upload {
	e.t.Helper()
	r := e.get("/api/v1/projects/"+project+"/datasets/"+dataset+"/uploads", e.admin)
	e.mustStatus(r, http.StatusOK, "list uploads")
	var us []catalog.Upload
	e.decode(r, &us)
	return us
}

// apiErrorBody is the JSON shape of an error answer, as a client sees it.
type apiErrorBody struct {
	Error struct {
		Status  int             `json:"status"`
		Code    string          `json:"code"`
		Message string          `json:"message"`
		Rule    string          `json:"rule"`
		Line    int64           `json:"line"`
		Column  string          `json:"column"`
		Upload  *catalog.Upload `json:"upload"`
	} `json:"error"`
}

// apiErr decodes an error answer and checks that its status field agrees
// with the HTTP status.
func (e *testEnv) apiErr(r response) apiErrorBody {
	e.t.Helper()
	var b apiErrorBody
	e.decode(r, &b)
	if b.Error.Status != r.Status || b.Error.Code == "" || b.Error.Message == "" {
		e.t.Fatalf("error body %s does not match status %d or lacks code/message", clipBody(r.Body), r.Status)
	}
	return b
}

// allBodies returns every response body received so far.
func (e *testEnv) allBodies() [][]byte {
	e.rec.mu.Lock()
	defer e.rec.mu.Unlock()
	return append([][]byte(nil), e.rec.bodies...)
}

func clipBody(b []byte) string {
	s := string(b)
	if len(s) > 2000 {
		s = s[:2000] + "..."
	}
	return strings.TrimSpace(s)
}

// versionReport returns version n's stored quality report, read by an admin.
func (e *testEnv) versionReport(project, dataset string, n int) *quality.Report {
	e.t.Helper()
	r := e.get(fmt.Sprintf("/api/v1/projects/%s/datasets/%s/versions/%d/quality", project, dataset, n), e.admin)
	e.mustStatus(r, http.StatusOK, "quality report")
	var q quality.Report
	e.decode(r, &q)
	return &q
}
