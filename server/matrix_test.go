package server

import (
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/golang-jwt/jwt/v5"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// The authorization matrix: every route of the server's route table, for
// every principal (an admin, a curator of the project, a curator of
// another project, a member, a partner bound to the site the upload
// names, a partner bound to another site, no token), and every route that
// takes a token for every token defect, each cell asserting its exact
// status. TestMatrixCoversEveryRoute fails when echo serves a route the
// table has no row for.

// principals, in the order of a row's want.
var principals = []string{"admin", "cur-a", "cur-b", "mem-a", "part-n", "part-s", "none"}

// matrixCSV is a valid upload whose one site is "north".
const matrixCSV = "site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\nnorth,c1,departure,2024-01-01T09:00:00Z\n"

// matrixFixture is the state every row starts from: per principal r, a
// dataset alpha/d-r with a published version 1, alpha/x-r to archive and
// delete, alpha/a-r archived, and a member token of alpha to revoke; the
// admin acts on scratch projects where a project would be changed.
type matrixFixture struct {
	e      *keyEnv
	tokens map[string]string
	victim map[string]string // principal -> jti of a token it may try to revoke
	file   map[string]string // principal -> sha256 of d-r's file
	// retired is an admin token signed by a key retired since; revoked an
	// admin token whose jti is revoked.
	retired, revoked string
}

func newMatrixFixture(t *testing.T) *matrixFixture {
	e := newKeyEnv(t)
	// An admin token under the first key, which is then rotated out and,
	// once the fixture is made, retired (RFC 8725 section 3.1: only the
	// keys the issuer still holds verify).
	retired := e.admin
	ks := e.keys()
	first, _ := ks.Active()
	if _, err := ks.Rotate(time.Now()); err != nil {
		t.Fatal(err)
	}
	e.save(ks)
	e.admin = e.token(Grant{Role: RoleAdmin, Subject: "admin-1"})
	e.createProject("alpha")
	e.createProject("beta")
	for _, p := range []string{"scratch-archive", "scratch-unarchive", "scratch-delete"} {
		e.createProject(p)
	}
	e.mustStatus(e.postJSON("/api/v1/projects/scratch-unarchive/archive", e.admin, map[string]string{}), 200, "archive project")
	f := &matrixFixture{e: e, victim: map[string]string{}, file: map[string]string{}}
	var partnerDS []string
	for _, r := range principals {
		for _, pfx := range []string{"d-", "x-", "a-"} {
			e.createDataset("alpha", pfx+r, "")
			partnerDS = append(partnerDS, "alpha/"+pfx+r)
		}
		e.mustStatus(e.upload("alpha", "d-"+r, e.admin, "seed.csv", []byte(matrixCSV)), 201, "seed")
		e.mustStatus(e.postJSON("/api/v1/projects/alpha/datasets/d-"+r+"/versions/1/publish", e.admin, map[string]string{}), 200, "publish")
		e.mustStatus(e.postJSON("/api/v1/projects/alpha/datasets/a-"+r+"/archive", e.admin, map[string]string{"reason": "setup"}), 200, "archive")
		vs := e.versions("alpha", "d-"+r)
		f.file[r] = vs[0].Manifest.Files[0].SHA256.String()
		c, err := e.auth.Verify(e.token(Grant{Role: RoleMember, Subject: "victim-" + r, Project: "alpha"}))
		if err != nil {
			t.Fatal(err)
		}
		f.victim[r] = c.ID
	}
	revoked := e.token(Grant{Role: RoleAdmin, Subject: "admin-revoked"})
	// Both pass before their defect: the refusals below are the defect's.
	for _, tok := range []string{retired, revoked} {
		if s := e.get("/api/v1/projects", tok).Status; s != 200 {
			t.Fatalf("a token before its defect: status %d, want 200", s)
		}
	}
	c, err := e.auth.Verify(revoked)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.store.RevokeToken(context.Background(), "test", c.ID, "matrix"); err != nil {
		t.Fatal(err)
	}
	// The raw EdDSA tokens of the defect table carry this jti.
	if err := e.store.RecordToken(context.Background(), "test", catalog.TokenRecord{JTI: "matrix-jti", Subject: "matrix", Role: RoleAdmin}); err != nil {
		t.Fatal(err)
	}
	ks = e.keys()
	if err := ks.Retire(first.KID, time.Now()); err != nil {
		t.Fatal(err)
	}
	e.save(ks)
	f.retired, f.revoked = retired, revoked
	f.tokens = map[string]string{
		"admin":  e.admin,
		"cur-a":  e.curator("alpha"),
		"cur-b":  e.curator("beta"),
		"mem-a":  e.member("alpha"),
		"part-n": e.token(Grant{Role: RolePartner, Subject: "partner-north", Datasets: partnerDS, Sites: []string{"north"}}),
		"part-s": e.token(Grant{Role: RolePartner, Subject: "partner-south", Datasets: partnerDS, Sites: []string{"south"}}),
		"none":   "",
	}
	return f
}

// matrixRow is one route of the table: its method and path pattern as
// registered, the path for a principal, a body, and the statuses of
// principals in order.
type matrixRow struct {
	method, pattern string
	path            func(f *matrixFixture, r string) string
	body            string
	ctype           string
	want            [7]int
}

const (
	mAPI = "/api/v1"
	mDS  = "/api/v1/projects/:project/datasets/:dataset"
	mV   = "/view/:project/:dataset/:version"
)

// matrixDSPath fills a dataset route with alpha/<prefix><principal>.
func matrixDSPath(pattern, prefix string) func(*matrixFixture, string) string {
	return func(f *matrixFixture, r string) string {
		p := strings.Replace(pattern, ":project", "alpha", 1)
		p = strings.Replace(p, ":dataset", prefix+r, 1)
		p = strings.Replace(p, ":version", "1", 1)
		return strings.Replace(p, ":file", f.file[r], 1)
	}
}

func fixedPath(p string) func(*matrixFixture, string) string {
	return func(*matrixFixture, string) string { return p }
}

// adminOr sends the admin to the scratch project a, the others to alpha.
func adminOr(a, suffix string) func(*matrixFixture, string) string {
	return func(_ *matrixFixture, r string) string {
		if r == "admin" {
			return mAPI + "/projects/" + a + suffix
		}
		return mAPI + "/projects/alpha" + suffix
	}
}

func matrixRows() []matrixRow {
	const j = "application/json"
	return []matrixRow{
		{method: "GET", pattern: mAPI + "/health", path: fixedPath(mAPI + "/health"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "GET", pattern: "/healthz", path: fixedPath("/healthz"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "GET", pattern: "/readyz", path: fixedPath("/readyz"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "GET", pattern: "/metrics", path: fixedPath("/metrics"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "GET", pattern: mAPI + "/schema", path: fixedPath(mAPI + "/schema"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "GET", pattern: "/.well-known/jwks.json", path: fixedPath("/.well-known/jwks.json"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "GET", pattern: "/api/v1/openapi.json", path: fixedPath("/api/v1/openapi.json"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "GET", pattern: mAPI + "/projects", path: fixedPath(mAPI + "/projects"), want: [7]int{200, 200, 200, 200, 200, 200, 401}},
		{method: "POST", pattern: mAPI + "/projects", path: fixedPath(mAPI + "/projects"), body: `{"name":"new-{r}"}`, ctype: j, want: [7]int{201, 403, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mAPI + "/projects/:project", path: fixedPath(mAPI + "/projects/alpha"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "PATCH", pattern: mAPI + "/projects/:project", path: fixedPath(mAPI + "/projects/alpha"), body: `{"title":"Alpha"}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mAPI + "/projects/:project/datasets", path: fixedPath(mAPI + "/projects/alpha/datasets"), want: [7]int{200, 200, 403, 200, 200, 200, 401}},
		{method: "POST", pattern: mAPI + "/projects/:project/datasets", path: fixedPath(mAPI + "/projects/alpha/datasets"), body: `{"name":"n-{r}"}`, ctype: j, want: [7]int{201, 201, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mDS, path: matrixDSPath(mDS, "d-"), want: [7]int{200, 200, 403, 200, 200, 200, 401}},
		{method: "PATCH", pattern: mDS, path: matrixDSPath(mDS, "d-"), body: `{"title":"T"}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mDS + "/changes", path: matrixDSPath(mDS+"/changes", "d-"), body: `{"changes":"correct"}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/profiles", path: matrixDSPath(mDS+"/profiles", "d-"), want: [7]int{200, 200, 403, 200, 200, 200, 401}},
		{method: "GET", pattern: mDS + "/metadata", path: matrixDSPath(mDS+"/metadata", "d-"), want: [7]int{200, 200, 403, 200, 200, 200, 401}},
		{method: "POST", pattern: mDS + "/metadata", path: matrixDSPath(mDS+"/metadata", "d-"), body: `{"creators":[{"name":"Ward Team"}]}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mDS + "/uploads", path: matrixDSPath(mDS+"/uploads", "d-"), body: matrixCSV + "north,c2,arrival,2024-01-02T08:00:00Z\n", ctype: "text/csv", want: [7]int{201, 201, 403, 403, 201, 403, 401}},
		{method: "GET", pattern: mDS + "/uploads", path: matrixDSPath(mDS+"/uploads", "d-"), want: [7]int{200, 200, 403, 200, 200, 200, 401}},
		{method: "GET", pattern: mDS + "/versions", path: matrixDSPath(mDS+"/versions", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/versions/:version", path: matrixDSPath(mDS+"/versions/:version", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/versions/:version/manifest", path: matrixDSPath(mDS+"/versions/:version/manifest", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/versions/:version/quality", path: matrixDSPath(mDS+"/versions/:version/quality", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/versions/:version/files/:file", path: matrixDSPath(mDS+"/versions/:version/files/:file", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "HEAD", pattern: mDS + "/versions/:version/files/:file", path: matrixDSPath(mDS+"/versions/:version/files/:file", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/versions/:version/summary", path: matrixDSPath(mDS+"/versions/:version/summary", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/versions/:version/export", path: matrixDSPath(mDS+"/versions/:version/export", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/versions/:version/bundle", path: matrixDSPath(mDS+"/versions/:version/bundle", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/versions/:version/citation", path: matrixDSPath(mDS+"/versions/:version/citation", "d-"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/diff", path: func(f *matrixFixture, r string) string { return matrixDSPath(mDS+"/diff", "d-")(f, r) + "?a=1&b=1" }, want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mDS + "/quality/trend", path: matrixDSPath(mDS+"/quality/trend", "d-"), want: [7]int{200, 200, 403, 200, 200, 200, 401}},
		{method: "GET", pattern: mDS + "/alerts", path: matrixDSPath(mDS+"/alerts", "d-"), want: [7]int{200, 200, 403, 200, 200, 200, 401}},
		{method: "GET", pattern: mDS + "/versions/:version/disclosure", path: matrixDSPath(mDS+"/versions/:version/disclosure", "d-"), want: [7]int{404, 404, 403, 404, 403, 403, 401}},
		{method: "POST", pattern: mDS + "/versions/:version/publish-override", path: matrixDSPath(mDS+"/versions/:version/publish-override", "d-"), body: `{"reason":"checked by hand"}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mAPI + "/projects/:project/disclosure", path: fixedPath(mAPI + "/projects/alpha/disclosure"), want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "PUT", pattern: mAPI + "/projects/:project/disclosure", path: fixedPath(mAPI + "/projects/alpha/disclosure"), body: `{"k":5,"max_risk":0.2}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mDS + "/archive", path: matrixDSPath(mDS+"/archive", "x-"), body: `{"reason":"closed"}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mDS + "/unarchive", path: matrixDSPath(mDS+"/unarchive", "a-"), body: `{}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mDS + "/delete", path: matrixDSPath(mDS+"/delete", "x-"), body: `{"reason":"made by mistake"}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mAPI + "/admin/gc", path: fixedPath(mAPI + "/admin/gc"), body: `{}`, ctype: j, want: [7]int{200, 403, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mAPI + "/admin/tokens", path: fixedPath(mAPI + "/admin/tokens"), want: [7]int{200, 403, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mAPI + "/admin/tokens", path: fixedPath(mAPI + "/admin/tokens"), body: `{"role":"member","subject":"s","project":"alpha","ttl":"1h"}`, ctype: j, want: [7]int{201, 403, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mAPI + "/admin/tokens/:jti/revoke", path: func(f *matrixFixture, r string) string { return mAPI + "/admin/tokens/" + f.victim[r] + "/revoke" }, body: `{"reason":"left"}`, ctype: j, want: [7]int{200, 403, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mAPI + "/projects/:project/tokens", path: fixedPath(mAPI + "/projects/alpha/tokens"), want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mAPI + "/projects/:project/tokens", path: fixedPath(mAPI + "/projects/alpha/tokens"), body: `{"role":"member","subject":"s","ttl":"1h"}`, ctype: j, want: [7]int{201, 201, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mAPI + "/projects/:project/tokens/:jti/revoke", path: func(f *matrixFixture, r string) string {
			return mAPI + "/projects/alpha/tokens/" + f.victim[r] + "/revoke"
		}, body: `{"reason":"left"}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mAPI + "/audit", path: fixedPath(mAPI + "/audit?project=alpha"), want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mAPI + "/audit/export", path: fixedPath(mAPI + "/audit/export?project=alpha"), want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mAPI + "/projects/:project/archive", path: adminOr("scratch-archive", "/archive"), body: `{"reason":"done"}`, ctype: j, want: [7]int{200, 403, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mAPI + "/projects/:project/unarchive", path: adminOr("scratch-unarchive", "/unarchive"), body: `{}`, ctype: j, want: [7]int{200, 403, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mAPI + "/projects/:project/delete", path: adminOr("scratch-delete", "/delete"), body: `{"reason":"ended"}`, ctype: j, want: [7]int{200, 403, 403, 403, 403, 403, 401}},
		// Pages: the token is the session cookie.
		{method: "GET", pattern: "/", path: fixedPath("/"), want: [7]int{303, 303, 303, 303, 303, 303, 200}},
		{method: "GET", pattern: "/static/:name", path: fixedPath("/static/style.css"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "GET", pattern: "/signin", path: fixedPath("/signin"), want: [7]int{200, 200, 200, 200, 200, 200, 200}},
		{method: "POST", pattern: "/signin", path: fixedPath("/signin"), body: "token=x", ctype: "application/x-www-form-urlencoded", want: [7]int{403, 403, 403, 403, 403, 403, 403}},
		{method: "POST", pattern: "/signout", path: fixedPath("/signout"), body: "", ctype: "application/x-www-form-urlencoded", want: [7]int{403, 403, 403, 403, 403, 403, 403}},
		{method: "GET", pattern: "/catalog", path: fixedPath("/catalog"), want: [7]int{200, 200, 200, 200, 200, 200, 401}},
		{method: "GET", pattern: "/view/:project", path: fixedPath("/view/alpha"), want: [7]int{303, 303, 303, 303, 303, 303, 401}},
		{method: "GET", pattern: "/view/:project/:dataset", path: func(_ *matrixFixture, r string) string { return "/view/alpha/d-" + r }, want: [7]int{200, 200, 403, 200, 200, 200, 401}},
		{method: "GET", pattern: mV, path: func(_ *matrixFixture, r string) string { return "/view/alpha/d-" + r + "/1" }, want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "POST", pattern: mV + "/publish", path: func(_ *matrixFixture, r string) string { return "/view/alpha/d-" + r + "/1/publish" }, body: "", ctype: "application/x-www-form-urlencoded", want: [7]int{403, 403, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mV + "/withdraw", path: func(_ *matrixFixture, r string) string { return "/view/alpha/d-" + r + "/1/withdraw" }, body: "reason=x", ctype: "application/x-www-form-urlencoded", want: [7]int{403, 403, 403, 403, 403, 403, 401}},
		{method: "GET", pattern: mV + "/bundle", path: func(_ *matrixFixture, r string) string { return "/view/alpha/d-" + r + "/1/bundle" }, want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mV + "/export", path: func(_ *matrixFixture, r string) string { return "/view/alpha/d-" + r + "/1/export" }, want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mV + "/citation", path: func(_ *matrixFixture, r string) string { return "/view/alpha/d-" + r + "/1/citation" }, want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		{method: "GET", pattern: mV + "/files/:file", path: func(f *matrixFixture, r string) string { return "/view/alpha/d-" + r + "/1/files/" + f.file[r] }, want: [7]int{200, 200, 403, 200, 403, 403, 401}},
		// Last: a retraction makes the version gone (410) for the pages above.
		{method: "POST", pattern: mDS + "/versions/:version/retract", path: matrixDSPath(mDS+"/versions/:version/retract", "d-"), body: `{"reason":"wrong site"}`, ctype: j, want: [7]int{200, 200, 403, 403, 403, 403, 401}},
		{method: "POST", pattern: mDS + "/versions/:version/publish", path: matrixDSPath(mDS+"/versions/:version/publish", "d-"), body: `{}`, ctype: j, want: [7]int{409, 409, 403, 403, 403, 403, 401}},
	}
}

// state is what a refused request of principal r must leave as it was:
// its datasets' standing, versions and uploads, the state of its
// dataset's version 1, and the projects' standing.
func (f *matrixFixture) state(t *testing.T, r string) string {
	ctx := context.Background()
	var b strings.Builder
	for _, d := range []string{"d-", "x-", "a-"} {
		ds, err := f.e.store.Dataset(ctx, "alpha", d+r)
		if err != nil {
			fmt.Fprintf(&b, "%s%s: %v; ", d, r, err)
			continue
		}
		fmt.Fprintf(&b, "%s%s: v%d u%d arch %v del %v rev %d title %q; ", d, r, ds.Latest, ds.Uploads, ds.Archived != nil, ds.Deleted != nil, ds.Revision(), ds.Title)
	}
	if v, err := f.e.store.Version(ctx, "alpha", "d-"+r, 1); err == nil {
		fmt.Fprintf(&b, "d-%s@1 %s; ", r, v.State)
	}
	ps, err := f.e.store.Projects(ctx)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range ps {
		fmt.Fprintf(&b, "%s arch %v title %q; ", p.Name, p.Archived != nil, p.Title)
	}
	return b.String()
}

// actedSince lists the successful audit entries from since on.
func (f *matrixFixture) actedSince(t *testing.T, since time.Time) []string {
	var out []string
	err := f.e.store.EachAudit(context.Background(), catalog.AuditFilter{From: since, Outcome: catalog.OutcomeOK, Limit: 1000}, func(a catalog.AuditEntry) error {
		out = append(out, a.Action+" "+a.Target)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// isPage reports whether a pattern is one of the pages (session cookie).
func (s *Server) isPage(method, pattern string) bool {
	for _, r := range s.routes {
		if r.method == method && r.path == pattern {
			return r.page
		}
	}
	return false
}

func (s *Server) isPublic(method, pattern string) bool {
	for _, r := range s.routes {
		if r.method == method && r.path == pattern {
			return r.public
		}
	}
	return false
}

// send makes one request of row for principal r with token tok.
func (f *matrixFixture) send(t *testing.T, row matrixRow, r, tok string) response {
	e := f.e.in(t)
	hdr := map[string]string{}
	if row.ctype != "" {
		hdr["Content-Type"] = row.ctype
	}
	if tok != "" {
		if f.e.server.isPage(row.method, row.pattern) {
			hdr["Cookie"] = sessionCookie + "=" + tok
		} else {
			hdr["Authorization"] = "Bearer " + tok
		}
	}
	body := strings.ReplaceAll(row.body, "{r}", r)
	req, err := http.NewRequest(row.method, e.srv.URL+row.path(f, r), strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	for k, v := range hdr {
		req.Header.Set(k, v)
	}
	// Redirects are answers too: the matrix asserts the first status.
	cl := &http.Client{Timeout: e.timeout, CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	res, err := cl.Do(req)
	if err != nil {
		t.Fatalf("%s %s: %v", row.method, row.path(f, r), err)
	}
	defer res.Body.Close()
	b, err := io.ReadAll(res.Body)
	if err != nil {
		t.Fatal(err)
	}
	return response{Status: res.StatusCode, Header: res.Header, Body: b}
}

// TestMatrixCoversEveryRoute: every route echo serves has a row, and
// every row names a route, so a new endpoint without a row fails here.
func TestMatrixCoversEveryRoute(t *testing.T) {
	e := newEnv(t)
	have := map[string]bool{}
	for _, r := range matrixRows() {
		k := r.method + " " + r.pattern
		if have[k] {
			t.Errorf("two rows for %s", k)
		}
		have[k] = true
	}
	served := map[string]bool{}
	for _, r := range e.server.echo.Routes() {
		if r.Path == "/*" && !slices.Contains([]string{"GET", "POST", "PUT", "PATCH", "DELETE", "HEAD"}, r.Method) || r.Method == "echo_route_not_found" {
			continue // the not-found handler
		}
		k := r.Method + " " + r.Path
		if r.Path == "/*" {
			continue
		}
		served[k] = true
		if !have[k] {
			t.Errorf("route %s has no row in the authorization matrix", k)
		}
	}
	for k := range have {
		if !served[k] {
			t.Errorf("row %s names no route", k)
		}
	}
	if len(served) != len(e.server.routes) {
		t.Errorf("echo serves %d routes, the route table has %d", len(served), len(e.server.routes))
	}
}

// TestAuthorizationMatrix asserts every principal's status on every route.
func TestAuthorizationMatrix(t *testing.T) {
	f := newMatrixFixture(t)
	discover := os.Getenv("FLOWCAT_MATRIX_DISCOVER") != ""
	var got strings.Builder
	for _, row := range matrixRows() {
		var st [7]int
		for i, r := range principals {
			t.Run(row.method+" "+row.pattern+"/"+r, func(t *testing.T) {
				before, since := f.state(t, r), time.Now()
				res := f.send(t, row, r, f.tokens[r])
				st[i] = res.Status
				if discover {
					return
				}
				if res.Status != row.want[i] {
					t.Fatalf("%s %s as %s: status %d, want %d; body %s", row.method, row.path(f, r), r, res.Status, row.want[i], clipBody(res.Body))
				}
				siteRefusal := r == "part-s" && strings.HasSuffix(row.pattern, "/uploads") && row.method == "POST"
				if siteRefusal {
					// Read, then refused whole: no version, the upload
					// recorded as rejected (its record and audit entry say
					// why), nothing else.
					if after := f.state(t, r); strings.Replace(after, "v1 u2", "v1 u1", 1) != before {
						t.Errorf("refused, yet the state changed:\n before %s\n after  %s", before, after)
					}
					if acted := f.actedSince(t, since); len(acted) != 1 || !strings.HasPrefix(acted[0], "upload.rejected ") {
						t.Errorf("a refused upload audited as %v, want one upload.rejected", acted)
					}
				} else if res.Status == http.StatusUnauthorized || res.Status == http.StatusForbidden {
					// A refusal changed nothing: the datasets the
					// principal's cells act on, and no successful action
					// in the audit trail.
					if after := f.state(t, r); after != before {
						t.Errorf("refused, yet the state changed:\n before %s\n after  %s", before, after)
					}
					if acted := f.actedSince(t, since); len(acted) > 0 {
						t.Errorf("refused, yet audited as done: %v", acted)
					}
				}
				if siteRefusal {
					// RFC 9110 section 15.5.4: understood, refused; the
					// body names the site binding.
					if !strings.Contains(string(res.Body), "north") {
						t.Errorf("the refusal of another site's rows does not name the site: %s", clipBody(res.Body))
					}
				}
			})
		}
		fmt.Fprintf(&got, "%s %s %v\n", row.method, row.pattern, st)
	}
	if discover {
		t.Log("\n" + got.String())
	}
}

// defect is one way a token can be wrong, with the rule that refuses it.
type defect struct {
	name string
	tok  func(t *testing.T, f *matrixFixture) string
}

// tokenDefects are admin tokens with one defect each: were the defect
// not caught, they would pass every route.
func tokenDefects() []defect {
	claims := func(f *matrixFixture, mod func(m map[string]string)) string {
		now := time.Now().Unix()
		m := map[string]string{
			"iss": `"` + testIssuer + `"`, "sub": `"matrix"`, "aud": `["` + Audience + `"]`,
			"exp": fmt.Sprint(now + 3600), "iat": fmt.Sprint(now), "nbf": fmt.Sprint(now), "jti": `"matrix-jti"`, "role": `"admin"`,
		}
		if mod != nil {
			mod(m)
		}
		var parts []string
		for _, k := range []string{"iss", "sub", "aud", "exp", "iat", "nbf", "jti", "role", "project"} {
			if v, ok := m[k]; ok {
				parts = append(parts, `"`+k+`":`+v)
			}
		}
		return "{" + strings.Join(parts, ",") + "}"
	}
	active := func(t *testing.T, f *matrixFixture) (ed25519.PrivateKey, string) {
		k, _ := f.e.keys().Active()
		priv, err := k.private()
		if err != nil {
			t.Fatal(err)
		}
		return priv, `{"alg":"EdDSA","typ":"JWT","kid":"` + k.KID + `"}`
	}
	signed := func(mod func(m map[string]string)) func(t *testing.T, f *matrixFixture) string {
		return func(t *testing.T, f *matrixFixture) string {
			priv, hdr := active(t, f)
			return signRaw(t, priv, hdr, claims(f, mod))
		}
	}
	return []defect{
		{"missing (RFC 6750 section 3)", func(*testing.T, *matrixFixture) string { return "" }},
		{"malformed (RFC 7519 section 7.2: not three base64url parts)", func(*testing.T, *matrixFixture) string { return "not.a-token" }},
		{"expired beyond the skew (RFC 7519 section 4.1.4, RFC 8725 section 3.10)", signed(func(m map[string]string) {
			m["exp"] = fmt.Sprint(time.Now().Add(-ClockSkew - time.Minute).Unix())
			m["iat"] = fmt.Sprint(time.Now().Add(-time.Hour).Unix())
			m["nbf"] = m["iat"]
		})},
		{"not yet valid (RFC 7519 section 4.1.5)", signed(func(m map[string]string) {
			m["nbf"] = fmt.Sprint(time.Now().Add(ClockSkew + time.Minute).Unix())
		})},
		{"alg none (RFC 7519 section 6.1, RFC 8725 section 3.1)", func(t *testing.T, f *matrixFixture) string {
			return f.e.in(t).craft(jwt.SigningMethodNone, jwt.UnsafeAllowNoneSignatureType, nil)
		}},
		{"HS256 signed with a wrong key (RFC 7515 section 5.2)", func(t *testing.T, f *matrixFixture) string {
			tok, err := NewAuthority([]byte("a wrong key, thirty-two bytes..."), testIssuer).Issue(Grant{Role: RoleAdmin, Subject: "x", TTL: time.Hour})
			if err != nil {
				t.Fatal(err)
			}
			return tok
		}},
		{"EdDSA signed by an unknown key (RFC 8037 section 3.1, RFC 7515 section 4.1.4)", func(t *testing.T, f *matrixFixture) string {
			_, stranger, _ := ed25519.GenerateKey(rand.Reader)
			return signRaw(t, stranger, `{"alg":"EdDSA","typ":"JWT","kid":"unknown-kid"}`, claims(f, nil))
		}},
		{"EdDSA signed by a retired key (RFC 8725 section 3.1)", func(t *testing.T, f *matrixFixture) string { return f.retired }},
		{"wrong audience (RFC 7519 section 4.1.3)", signed(func(m map[string]string) { m["aud"] = `["some-other-api"]` })},
		{"wrong issuer (RFC 7519 section 4.1.1)", signed(func(m map[string]string) { m["iss"] = `"someone-else"` })},
		{"revoked (RFC 7519 section 4.1.7: jti)", func(t *testing.T, f *matrixFixture) string { return f.revoked }},
		{"unknown crit (RFC 7515 section 4.1.11)", func(t *testing.T, f *matrixFixture) string {
			priv, hdr := active(t, f)
			hdr = strings.TrimSuffix(hdr, "}") + `,"crit":["x-flowcat-unknown"],"x-flowcat-unknown":1}`
			return signRaw(t, priv, hdr, claims(f, nil))
		}},
		{"exp as a string (RFC 7519 sections 2 and 4.1.4: NumericDate)", signed(func(m map[string]string) { m["exp"] = `"` + m["exp"] + `"` })},
	}
}

// TestTokenDefectMatrix sends every defective token to every route that
// takes a token: each is refused with 401 (pages answer their sign-in
// page with 401), a raw EdDSA token without the defect passes (the
// control: the refusals are the defect's), and nothing changed: no upload
// was stored and the audit trail holds no successful action by a
// defective token's subject.
func TestTokenDefectMatrix(t *testing.T) {
	f := newMatrixFixture(t)
	before := f.e.dataset("alpha", "d-admin")
	priv := func() (ed25519.PrivateKey, string) {
		k, _ := f.e.keys().Active()
		p, err := k.private()
		if err != nil {
			t.Fatal(err)
		}
		return p, `{"alg":"EdDSA","typ":"JWT","kid":"` + k.KID + `"}`
	}
	now := time.Now().Unix()
	p, hdr := priv()
	control := signRaw(t, p, hdr, fmt.Sprintf(`{"iss":"%s","sub":"matrix","aud":["%s"],"exp":%d,"iat":%d,"nbf":%d,"jti":"matrix-jti","role":"admin"}`, testIssuer, Audience, now+3600, now, now))
	if s := f.e.get("/api/v1/projects", control).Status; s != 200 {
		t.Fatalf("control token: status %d, want 200", s)
	}
	// Expired, but within the allowed clock skew (RFC 8725 section 3.10
	// leaves the bound to the application; ClockSkew is ours): accepted.
	skewed := signRaw(t, p, hdr, fmt.Sprintf(`{"iss":"%s","sub":"matrix","aud":["%s"],"exp":%d,"iat":%d,"nbf":%d,"jti":"matrix-jti","role":"admin"}`, testIssuer, Audience, now-int64(ClockSkew/time.Second)/2, now-600, now-600))
	if s := f.e.get("/api/v1/projects", skewed).Status; s != 200 {
		t.Fatalf("expired within the skew: status %d, want 200", s)
	}
	start := time.Now()
	for _, d := range tokenDefects() {
		tok := d.tok(t, f)
		for _, row := range matrixRows() {
			if f.e.server.isPublic(row.method, row.pattern) {
				continue
			}
			t.Run(d.name+"/"+row.method+" "+row.pattern, func(t *testing.T) {
				res := f.send(t, row, "admin", tok)
				if res.Status != http.StatusUnauthorized {
					t.Fatalf("status %d, want 401; body %s", res.Status, clipBody(res.Body))
				}
			})
		}
	}
	after := f.e.dataset("alpha", "d-admin")
	if after.Latest != before.Latest || after.Uploads != before.Uploads {
		t.Errorf("defective tokens changed the dataset: version %d -> %d, uploads %d -> %d", before.Latest, after.Latest, before.Uploads, after.Uploads)
	}
	if acted := f.actedSince(t, start); len(acted) > 0 {
		t.Errorf("defective tokens acted: %v", acted)
	}
}

// TestPageFormMatrix completes the matrix for the page forms, which need
// a signed-in browser and its form token: each principal signs in through
// the sign-in form and posts the version page's withdraw and publish
// forms of its own dataset, each status asserted; a refusal changes
// nothing.
func TestPageFormMatrix(t *testing.T) {
	f := newMatrixFixture(t)
	forms := []struct {
		name string
		path func(r string) string
		form url.Values
		want [6]int // the principals but "none", which the route rows cover
	}{
		{"withdraw", func(r string) string { return "/view/alpha/d-" + r + "/1/withdraw" }, url.Values{"reason": {"wrong site"}}, [6]int{303, 303, 403, 403, 403, 403}},
		{"publish", func(r string) string { return "/view/alpha/d-" + r + "/1/publish" }, url.Values{}, [6]int{409, 409, 403, 403, 403, 403}}, // withdrawn above
	}
	discover := os.Getenv("FLOWCAT_MATRIX_DISCOVER") != ""
	var got strings.Builder
	for _, fm := range forms {
		var st [6]int
		for i, r := range principals[:6] {
			t.Run(fm.name+"/"+r, func(t *testing.T) {
				b := f.e.in(t).browser(t)
				b.signIn(f.tokens[r])
				b.get("/signin")
				form := url.Values{"csrf": {b.formToken()}}
				for k, v := range fm.form {
					form[k] = v
				}
				before, since := f.state(t, r), time.Now()
				res := b.post(fm.path(r), form, nil)
				st[i] = res.Status
				if discover {
					return
				}
				if res.Status != fm.want[i] {
					t.Fatalf("POST %s as %s: status %d, want %d; body %s", fm.path(r), r, res.Status, fm.want[i], clipBody(res.Body))
				}
				if res.Status == http.StatusForbidden {
					if after := f.state(t, r); after != before {
						t.Errorf("refused, yet the state changed:\n before %s\n after  %s", before, after)
					}
					if acted := f.actedSince(t, since); len(acted) > 0 {
						t.Errorf("refused, yet audited as done: %v", acted)
					}
				}
			})
		}
		fmt.Fprintf(&got, "%s %v\n", fm.name, st)
	}
	if discover {
		t.Log("\n" + got.String())
	}
}
