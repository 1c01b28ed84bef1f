package server

import (
	"archive/zip"
	"bufio"
	"bytes"
	"crypto/sha256"
	"encoding/csv"
	"encoding/hex"
	"fmt"
	"io"
	"net/http"
	"net/http/cookiejar"
	"net/url"
	"regexp"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// pagesEnv is a project "ward" whose dataset "events" makes drafts, with
// three uploads by the partner "partner-site" (versions 1 and 2, the
// first published, and a refused file) and one by a second partner
// (version 3, a draft); and a project "clinic" of its own.
type pagesEnv struct {
	*testEnv
	curator, member, partner, partner2, outsider string
}

func newPagesEnv(t *testing.T) *pagesEnv {
	e := newEnv(t)
	e.createProject("ward")
	e.mustStatus(e.postJSON("/api/v1/projects/ward/datasets", e.admin, map[string]any{"name": "events", "title": "Ward three, nightly", "profile": wardProfile, "drafts": true}), http.StatusCreated, "dataset")
	e.createProject("clinic")
	e.createDataset("clinic", "calls", wardProfile)
	p := &pagesEnv{testEnv: e, curator: e.curator("ward"), member: e.member("ward"), partner: e.partner("ward/events"),
		partner2: e.token(Grant{Role: RolePartner, Subject: "second-site", Datasets: []string{"ward/events"}}), outsider: e.member("clinic")}
	e.mustStatus(e.upload("ward", "events", p.partner, "night-04.csv", wardFile(4, 90)), http.StatusCreated, "upload 1")
	e.mustStatus(e.upload("ward", "events", p.partner, "night-05.csv", wardFile(5, 60)), http.StatusCreated, "upload 2")
	e.mustStatus(e.upload("ward", "events", p.partner, "broken-06.csv", []byte(wardHeader+strings.ReplaceAll(wardRows(6, 9), "REG", "XX"))), http.StatusUnprocessableEntity, "refused upload")
	e.mustStatus(e.upload("ward", "events", p.partner2, "other-07.csv", wardFile(7, 30)), http.StatusCreated, "upload 3")
	e.mustStatus(e.postJSON("/api/v1/projects/ward/datasets/events/versions/1/publish", p.curator, struct{}{}), http.StatusOK, "publish 1")
	e.mustStatus(e.upload("clinic", "calls", e.admin, "calls.csv", wardFile(8, 30)), http.StatusCreated, "clinic upload")
	return p
}

// browser is a cookie-keeping HTTP client that does not follow
// redirects, as a page reader's browser would keep cookies.
type browser struct {
	t    *testing.T
	e    *testEnv
	jar  http.CookieJar
	last string // the last page's body
}

func (e *testEnv) browser(t *testing.T) *browser {
	jar, _ := cookiejar.New(nil)
	return &browser{t: t, e: e, jar: jar}
}

func (b *browser) do(req *http.Request) response {
	b.t.Helper()
	cl := &http.Client{Jar: b.jar, Timeout: b.e.timeout, CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	res, err := cl.Do(req)
	if err != nil {
		b.t.Fatalf("%s %s: %v", req.Method, req.URL, err)
	}
	defer res.Body.Close()
	body, err := io.ReadAll(res.Body)
	if err != nil {
		b.t.Fatal(err)
	}
	b.e.rec.mu.Lock()
	b.e.rec.bodies = append(b.e.rec.bodies, body)
	b.e.rec.mu.Unlock()
	b.last = string(body)
	return response{Status: res.StatusCode, Header: res.Header, Body: body}
}

func (b *browser) get(path string) response {
	req, _ := http.NewRequest(http.MethodGet, b.e.srv.URL+path, nil)
	return b.do(req)
}

var csrfRE = regexp.MustCompile(`name="csrf" value="([^"]+)"`)

// formToken is the form token of the last page.
func (b *browser) formToken() string {
	b.t.Helper()
	m := csrfRE.FindStringSubmatch(b.last)
	if m == nil {
		b.t.Fatalf("the page has no form token:\n%s", clipBody([]byte(b.last)))
	}
	return m[1]
}

func (b *browser) post(path string, form url.Values, hdr map[string]string) response {
	req, _ := http.NewRequest(http.MethodPost, b.e.srv.URL+path, strings.NewReader(form.Encode()))
	req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	for k, v := range hdr {
		req.Header.Set(k, v)
	}
	return b.do(req)
}

// signIn signs in with token through the sign-in form.
func (b *browser) signIn(token string) {
	b.t.Helper()
	b.e.mustStatus(b.get("/signin"), http.StatusOK, "sign-in page")
	r := b.post("/signin", url.Values{"token": {token}, "csrf": {b.formToken()}}, nil)
	if r.Status != http.StatusSeeOther || r.Header.Get("Location") != "/catalog" {
		b.t.Fatalf("sign in: %d %s: %s", r.Status, r.Header.Get("Location"), clipBody(r.Body))
	}
}

func (b *browser) page(path string, want int) string {
	b.t.Helper()
	r := b.get(path)
	if r.Status != want {
		b.t.Fatalf("GET %s: %d, want %d: %s", path, r.Status, want, clipBody(r.Body))
	}
	if ct := r.Header.Get("Content-Type"); want != http.StatusSeeOther && !strings.HasPrefix(ct, "text/html") {
		b.t.Fatalf("GET %s: content type %q, want HTML", path, ct)
	}
	return string(r.Body)
}

func mustHave(t *testing.T, what, body string, wants ...string) {
	t.Helper()
	for _, w := range wants {
		if !strings.Contains(body, w) {
			t.Errorf("%s lacks %q", what, w)
		}
	}
}

func mustNotHave(t *testing.T, what, body string, nots ...string) {
	t.Helper()
	for _, w := range nots {
		if strings.Contains(body, w) {
			t.Errorf("%s shows %q", what, w)
		}
	}
}

func TestPageSignIn(t *testing.T) {
	e := newPagesEnv(t)
	b := e.browser(t)
	// A visitor without a token is told what to do, on every page.
	home := b.page("/", http.StatusOK)
	mustHave(t, "home", home, "No token yet?", "ask the curator of your project", `<textarea id="token" name="token"`, `<label for="token">`)
	cat := b.page("/catalog", http.StatusUnauthorized)
	mustHave(t, "catalog without a token", cat, "Sign in to the catalog", `name="next" value="/catalog"`)
	b.page("/view/ward/events/1", http.StatusUnauthorized)

	// The form needs its form token; another site's form is refused.
	b.page("/signin", http.StatusOK)
	tok := b.formToken()
	if r := b.post("/signin", url.Values{"token": {e.member}}, nil); r.Status != http.StatusForbidden {
		t.Fatalf("sign in without the form token: %d", r.Status)
	}
	if r := b.post("/signin", url.Values{"token": {e.member}, "csrf": {tok}}, map[string]string{"Origin": "http://elsewhere.example"}); r.Status != http.StatusForbidden {
		t.Fatalf("sign in from another origin: %d", r.Status)
	}
	if r := b.post("/signin", url.Values{"token": {e.member}, "csrf": {tok}}, map[string]string{"Sec-Fetch-Site": "cross-site"}); r.Status != http.StatusForbidden {
		t.Fatalf("sign in from another site: %d", r.Status)
	}
	// Another browser's form token does not fit this browser's cookie.
	other := e.browser(t)
	other.page("/signin", http.StatusOK)
	if r := b.post("/signin", url.Values{"token": {e.member}, "csrf": {other.formToken()}}, nil); r.Status != http.StatusForbidden {
		t.Fatalf("sign in with another browser's form token: %d", r.Status)
	}
	// A bad token is named as such.
	r := b.post("/signin", url.Values{"token": {"not-a-token"}, "csrf": {tok}}, nil)
	if r.Status != http.StatusUnauthorized || !strings.Contains(string(r.Body), "That token was not accepted") {
		t.Fatalf("bad token: %d %s", r.Status, clipBody(r.Body))
	}

	// A good one: a cookie scripts cannot read, for this site only, and a
	// redirect that does not carry it; back to the page asked for.
	r = b.post("/signin", url.Values{"token": {e.member}, "csrf": {tok}, "next": {"/view/ward/events"}}, nil)
	if r.Status != http.StatusSeeOther || r.Header.Get("Location") != "/view/ward/events" {
		t.Fatalf("sign in: %d %q", r.Status, r.Header.Get("Location"))
	}
	var session *http.Cookie
	for _, c := range (&http.Response{Header: r.Header}).Cookies() {
		if c.Name == sessionCookie {
			session = c
		}
	}
	if session == nil || !session.HttpOnly || session.SameSite != http.SameSiteStrictMode || session.Secure || session.Path != "/" || session.Expires.IsZero() {
		t.Fatalf("session cookie %+v: want HttpOnly, SameSite=Strict, not Secure over plain HTTP, path /, expiring with the token", session)
	}
	// Behind a proxy that ends TLS, the cookie is Secure.
	b3 := e.browser(t)
	b3.page("/signin", http.StatusOK)
	r3 := b3.post("/signin", url.Values{"token": {e.member}, "csrf": {b3.formToken()}}, map[string]string{"X-Forwarded-Proto": "https", "Origin": "https://" + strings.TrimPrefix(e.srv.URL, "http://")})
	if r3.Status != http.StatusSeeOther || !strings.Contains(r3.Header.Get("Set-Cookie"), "Secure") {
		t.Fatalf("sign in through a TLS proxy: %d, cookie %q", r3.Status, r3.Header.Get("Set-Cookie"))
	}
	// An open redirect is not followed.
	b2 := e.browser(t)
	b2.page("/signin", http.StatusOK)
	if r := b2.post("/signin", url.Values{"token": {e.member}, "csrf": {b2.formToken()}, "next": {"//elsewhere.example/x"}}, nil); r.Header.Get("Location") != "/catalog" {
		t.Fatalf("next=//elsewhere: redirect to %q", r.Header.Get("Location"))
	}

	cat = b.page("/catalog", http.StatusOK)
	mustHave(t, "catalog", cat, "Signed in as <strong>member-ward</strong>", `href="/view/ward/events"`)
	// The cookie is for pages: the API still wants its Authorization header.
	req, _ := http.NewRequest(http.MethodGet, e.srv.URL+"/api/v1/projects", nil)
	if r := b.do(req); r.Status != http.StatusUnauthorized {
		t.Fatalf("API with the page cookie only: %d", r.Status)
	}
	// Sign out forgets it.
	b.page("/catalog", http.StatusOK)
	r = b.post("/signout", url.Values{"csrf": {b.formToken()}}, nil)
	if r.Status != http.StatusOK || !strings.Contains(string(r.Body), "You are signed out") {
		t.Fatalf("sign out: %d", r.Status)
	}
	b.page("/catalog", http.StatusUnauthorized)

	// A revoked token stops working on the next page.
	b.signIn(e.curator)
	b.page("/catalog", http.StatusOK)
	cl, err := e.auth.Verify(e.curator)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.store.RevokeToken(t.Context(), "admin-1", cl.ID, "test"); err != nil {
		t.Fatal(err)
	}
	mustHave(t, "page after revocation", b.page("/catalog", http.StatusUnauthorized), "no longer works", "was revoked")

	// No page ever shows a token.
	for _, body := range e.allBodies() {
		for _, tk := range []string{e.member, e.curator, e.partner, e.admin} {
			if bytes.Contains(body, []byte(tk)) {
				t.Fatalf("a page shows a token: %s", clipBody(body))
			}
		}
	}
}

func TestPagesMember(t *testing.T) {
	e := newPagesEnv(t)
	b := e.browser(t)
	b.signIn(e.member)
	cat := b.page("/catalog", http.StatusOK)
	mustHave(t, "member's catalog", cat, `data-dataset="ward/events"`, "Ward three, nightly", "ward-3", "2024-03-04 to 2024-03-04", `href="/view/ward/events/1"`)
	mustNotHave(t, "member's catalog", cat, "clinic", "calls")
	// Filters.
	mustHave(t, "filter by name", b.page("/catalog?q=nightly", http.StatusOK), `data-dataset="ward/events"`, "1 of 1 datasets")
	mustHave(t, "filter by a name that is not there", b.page("/catalog?q=zzz", http.StatusOK), "No dataset matches", "0 of 1")
	mustHave(t, "filter by site", b.page("/catalog?site=ward-3", http.StatusOK), `data-dataset="ward/events"`)
	mustHave(t, "filter by days", b.page("/catalog?from=2024-03-04&to=2024-03-04", http.StatusOK), `data-dataset="ward/events"`)
	mustHave(t, "filter by days without events", b.page("/catalog?from=2025-01-01", http.StatusOK), "No dataset matches")
	mustHave(t, "bad day", b.page("/catalog?from=yesterday", http.StatusBadRequest), "want a day")
	b.page("/catalog?colour=red", http.StatusBadRequest)
	b.page("/view/ward", http.StatusSeeOther)

	e.mustStatus(e.do(http.MethodPatch, "/api/v1/projects/ward/datasets/events", e.curator, strings.NewReader(`{"description": "Nightly exports of ward three <b>since March</b>."}`),
		map[string]string{"Content-Type": "application/json"}), http.StatusOK, "describe the dataset")
	ds := b.page("/view/ward/events", http.StatusOK)
	mustHave(t, "description", ds, `<p id="description">Nightly exports of ward three &lt;b&gt;since March&lt;/b&gt;.</p>`)
	mustHave(t, "member's dataset page", ds, `<table id="versions">`, `data-version="1"`, "flowcat pull ward/events@1 -o events-v1", "cff-version: 1.2.0",
		`id="trend-all"`, `id="trend-ward-3"`, "night-04.csv", "format: csv", "Europe/Amsterdam")
	// Drafts and the uploads behind them stay hidden (a refused upload
	// made no version, and shows, as in the API's list).
	mustNotHave(t, "member's dataset page", ds, `data-version="2"`, `data-version="3"`, "night-05.csv", "other-07.csv", "Curation history")
	b.page("/view/ward/events/2", http.StatusNotFound)

	v := b.page("/view/ward/events/1", http.StatusOK)
	var ver catalog.Version
	e.decode(e.get("/api/v1/projects/ward/datasets/events/versions/1", e.member), &ver)
	rep := e.versionReport("ward", "events", 1)
	mustHave(t, "version page", v, ver.SnapshotID.String(), `id="arrivals-how"`, `id="los-hist"`, `id="occupancy"`, `aria-labelledby="arrivals-how-t"`,
		"/view/ward/events/1/bundle?format=zip", `id="export-form"`, "flowcat pull ward/events@1", "cff-version: 1.2.0", fmt.Sprintf("Score <strong>%.1f</strong>", *rep.Score),
		`<select id="x-activity" name="activity"`, `<table id="workload">`)
	// The workload table holds the summary's busiest resource and day.
	var sum summary.Summary
	e.decode(e.do(http.MethodGet, "/api/v1/projects/ward/datasets/events/versions/1/summary", e.member, nil, map[string]string{"Accept-Encoding": "identity"}), &sum)
	if sum.Process == nil || len(sum.Process.Workload) == 0 {
		t.Fatal("the ward's summary has no workload")
	}
	w0 := sum.Process.Workload[0]
	mustHave(t, "workload row", v, fmt.Sprintf(`<tr><th scope="row" class="mono">%s</th><td>%s</td><td class="n">%d</td></tr>`, w0.Resource, w0.Date, w0.Events))
	for _, f := range rep.Findings() {
		mustHave(t, "version page", v, fmt.Sprintf(`data-code="%s" data-count="%d"`, f.Code, f.Count))
	}
	// 168 bars for the hours of the week, each with its interval.
	if n := strings.Count(between(v, `id="arrivals-how"`, "</svg>"), `<rect class="bar"`); n != 168 {
		t.Errorf("arrivals chart has %d bars, want 168", n)
	}
	mustNotHave(t, "member's version page", v, `id="publish-form"`, `id="withdraw-form"`)
	// A member's form is refused even with a good form token.
	if r := b.post("/view/ward/events/1/withdraw", url.Values{"csrf": {b.formToken()}, "reason": {"mine"}}, nil); r.Status != http.StatusForbidden || !strings.Contains(string(r.Body), "Not for this token") {
		t.Fatalf("member withdraws: %d", r.Status)
	}
	if r := b.post("/view/ward/events/2/publish", url.Values{"csrf": {b.formToken()}}, nil); r.Status != http.StatusForbidden {
		t.Fatalf("member publishes: %d", r.Status)
	}

	// Downloads through the page's links: a bundle whose SHA256SUMS hold.
	r := b.get("/view/ward/events/1/bundle?format=zip")
	e.mustStatus(r, http.StatusOK, "bundle")
	checkBundleSums(t, r.Body)
	// The export form: a day in the dataset's zone and a few columns.
	r = b.get("/view/ward/events/1/export?format=csv&from=2024-03-04&to=2024-03-04&site=ward-3&columns=site&columns=event_type&columns=occurred_at&queue=")
	e.mustStatus(r, http.StatusOK, "export")
	rows, err := csv.NewReader(bytes.NewReader(r.Body)).ReadAll()
	if err != nil || len(rows) != 91 || strings.Join(rows[0], ",") != "site,event_type,occurred_at" {
		t.Fatalf("export: %d rows, header %v, %v", len(rows), rows[0], err)
	}
	r = b.get("/view/ward/events/1/export?format=csv&type=arrival&columns=event_type")
	if rows, _ := csv.NewReader(bytes.NewReader(r.Body)).ReadAll(); len(rows) != 31 || rows[1][0] != "arrival" {
		t.Fatalf("export of the arrivals: %d rows", len(rows))
	}
	r = b.get("/view/ward/events/1/export?format=csv&from=2024-03-05")
	if rows, _ := csv.NewReader(bytes.NewReader(r.Body)).ReadAll(); len(rows) != 1 {
		t.Fatalf("export of a day without events: %d rows", len(rows))
	}
	mustHave(t, "citation", string(b.get("/view/ward/events/1/citation").Body), "cff-version")
}

// between is the part of s from the first from up to the next to.
func between(s, from, to string) string {
	i := strings.Index(s, from)
	if i < 0 {
		return ""
	}
	j := strings.Index(s[i:], to)
	if j < 0 {
		return s[i:]
	}
	return s[i : i+j]
}

// checkBundleSums opens a zip bundle and checks every file SHA256SUMS
// names (sha256sum's format: hex, two spaces, path).
func checkBundleSums(t *testing.T, b []byte) {
	t.Helper()
	zr, err := zip.NewReader(bytes.NewReader(b), int64(len(b)))
	if err != nil {
		t.Fatalf("bundle is not a zip: %v", err)
	}
	files := map[string][]byte{}
	var root string
	for _, f := range zr.File {
		rc, err := f.Open()
		if err != nil {
			t.Fatal(err)
		}
		data, _ := io.ReadAll(rc)
		rc.Close()
		files[f.Name] = data
		if strings.HasSuffix(f.Name, "SHA256SUMS") {
			root = strings.TrimSuffix(f.Name, "SHA256SUMS")
		}
	}
	sums, ok := files[root+"SHA256SUMS"]
	if !ok {
		t.Fatal("bundle has no SHA256SUMS")
	}
	n := 0
	sc := bufio.NewScanner(bytes.NewReader(sums))
	for sc.Scan() {
		want, path, ok := strings.Cut(sc.Text(), "  ")
		data, has := files[root+path]
		if !ok || !has {
			t.Fatalf("SHA256SUMS line %q names no file of the bundle", sc.Text())
		}
		got := sha256.Sum256(data)
		if hex.EncodeToString(got[:]) != want {
			t.Fatalf("%s: sha256 %x, SHA256SUMS says %s", path, got, want)
		}
		n++
	}
	if n < 2 {
		t.Fatalf("SHA256SUMS checks %d files", n)
	}
}

func TestPagesPartner(t *testing.T) {
	e := newPagesEnv(t)
	b := e.browser(t)
	b.signIn(e.partner)
	cat := b.page("/catalog", http.StatusOK)
	mustHave(t, "partner's catalog", cat, `data-dataset="ward/events"`, "3 of your uploads")
	mustNotHave(t, "partner's catalog", cat, "clinic", "Newest version", "Score")
	ds := b.page("/view/ward/events", http.StatusOK)
	mustHave(t, "partner's dataset page", ds, "Your uploads", "night-04.csv", "night-05.csv", "broken-06.csv", "Rows refused, by reason", "unknown_code", "line 2")
	// Nothing else: not the other partner's uploads, nor versions,
	// trend, citation or pull command.
	var v catalog.Version
	e.decode(e.get("/api/v1/projects/ward/datasets/events/versions/1", e.member), &v)
	mustNotHave(t, "partner's dataset page", ds, "other-07.csv", "second-site", `id="versions"`, `id="trend-`, "flowcat pull", "cff-version", v.SnapshotID.String())
	for _, p := range []string{"/view/ward/events/1", "/view/ward/events/1/bundle", "/view/ward/events/1/export", "/view/ward/events/1/citation", "/view/clinic/calls"} {
		b.page(p, http.StatusForbidden)
	}
	// The second partner sees its own upload only.
	b2 := e.browser(t)
	b2.signIn(e.partner2)
	ds = b2.page("/view/ward/events", http.StatusOK)
	mustHave(t, "second partner's page", ds, "other-07.csv")
	mustNotHave(t, "second partner's page", ds, "night-04.csv", "broken-06.csv")
}

func TestPagesOtherProject(t *testing.T) {
	e := newPagesEnv(t)
	b := e.browser(t)
	b.signIn(e.outsider)
	cat := b.page("/catalog", http.StatusOK)
	mustHave(t, "outsider's catalog", cat, `data-dataset="clinic/calls"`)
	mustNotHave(t, "outsider's catalog", cat, "ward/events", "/view/ward", "Ward three", "night-04")
	for _, p := range []string{"/view/ward/events", "/view/ward/events/1", "/view/ward/events/1/bundle?format=zip", "/view/ward/events/1/files/" + strings.Repeat("0", 64)} {
		body := b.page(p, http.StatusForbidden)
		mustNotHave(t, "outsider's "+p, body, "night-04", "ward-3", "Ward three")
	}
	if r := b.post("/view/ward/events/2/publish", url.Values{"csrf": {b.formToken()}}, nil); r.Status != http.StatusForbidden {
		t.Fatalf("outsider publishes: %d", r.Status)
	}
}

func TestPagesCurator(t *testing.T) {
	e := newPagesEnv(t)
	b := e.browser(t)
	b.signIn(e.curator)
	ds := b.page("/view/ward/events", http.StatusOK)
	mustHave(t, "curator's dataset page", ds, `data-version="2"`, `data-version="3"`, "other-07.csv", "broken-06.csv", `<table id="audit">`, "version.create", "upload.rejected")
	v2 := b.page("/view/ward/events/2", http.StatusOK)
	mustHave(t, "draft page", v2, `id="publish-form"`, `id="withdraw-form"`, `<label for="reason">`, `<span class="state draft" id="state">draft</span>`)

	// Compare with version 1.
	d := b.page("/view/ward/events/2?diff=1", http.StatusOK)
	var diff api.Diff
	e.decode(e.get("/api/v1/projects/ward/datasets/events/diff?a=1&b=2", e.curator), &diff)
	mustHave(t, "diff", d, `id="diff-result"`, fmt.Sprintf("<strong>%d</strong> events added, <strong>%d</strong> removed", diff.Events.Added, diff.Events.Removed))
	b.page("/view/ward/events/2?diff=99", http.StatusNotFound)

	// Publish: the member sees it afterwards.
	r := b.post("/view/ward/events/2/publish", url.Values{"csrf": {b.formToken()}}, nil)
	if r.Status != http.StatusSeeOther || r.Header.Get("Location") != "/view/ward/events/2" {
		t.Fatalf("publish: %d %s %s", r.Status, r.Header.Get("Location"), clipBody(r.Body))
	}
	var v catalog.Version
	e.decode(e.get("/api/v1/projects/ward/datasets/events/versions/2", e.member), &v)
	if v.State != catalog.StatePublished || v.PublishedBy != "curator-ward" {
		t.Fatalf("after publishing from the page: %+v", v)
	}
	// The curation history shows the publication, newest first.
	hist := b.page("/view/ward/events", http.StatusOK)
	if i, j := strings.Index(hist, "version.publish"), strings.Index(hist, "version.create"); i < 0 || j < 0 || i > j || !strings.Contains(hist, "curator-ward") {
		t.Errorf("curation history: publish at %d, version.create at %d; want the publish first, by curator-ward", i, j)
	}
	// Withdraw: a reason is needed; then downloads end and the reason shows.
	b.page("/view/ward/events/1", http.StatusOK)
	if r := b.post("/view/ward/events/1/withdraw", url.Values{"csrf": {b.formToken()}, "reason": {"  "}}, nil); r.Status != http.StatusBadRequest || !strings.Contains(string(r.Body), "needs a reason") {
		t.Fatalf("withdraw without a reason: %d", r.Status)
	}
	r = b.post("/view/ward/events/1/withdraw", url.Values{"csrf": {b.formToken()}, "reason": {"the wrong ward was exported"}}, nil)
	if r.Status != http.StatusSeeOther {
		t.Fatalf("withdraw: %d %s", r.Status, clipBody(r.Body))
	}
	m := e.browser(t)
	m.signIn(e.member)
	v1 := m.page("/view/ward/events/1", http.StatusOK)
	mustHave(t, "withdrawn version", v1, `id="withdrawn"`, "the wrong ward was exported", "cff-version")
	mustNotHave(t, "withdrawn version", v1, "/bundle?format=zip", `id="export-form"`, "flowcat pull")
	mustHave(t, "withdrawn bundle", m.page("/view/ward/events/1/bundle?format=zip", http.StatusGone), "Withdrawn", "the wrong ward was exported")
	b.page("/view/ward/events/1", http.StatusOK)
	mustHave(t, "publishing a withdrawn version", string(b.post("/view/ward/events/1/publish", url.Values{"csrf": {b.formToken()}}, nil).Body), "<strong>409</strong>")
	// An archived dataset says so, and why.
	e.mustStatus(e.postJSON("/api/v1/projects/ward/datasets/events/archive", e.curator, map[string]string{"reason": "the study closed"}), http.StatusOK, "archive")
	mustHave(t, "archived dataset", b.page("/view/ward/events", http.StatusOK), `id="archived"`, "the study closed")
}

// alertDataset makes ward/nightly: six nightly uploads of ward-3 with
// every field filled, then one whose staff column is empty, which drops
// resource_id's completeness and raises a drift alert.
func alertDataset(t *testing.T, e *testEnv) []catalog.UploadAlert {
	t.Helper()
	e.createDataset("ward", "nightly", wardProfile)
	partner := e.partner("ward/nightly")
	for day := 10; day < 16; day++ {
		e.mustStatus(e.upload("ward", "nightly", partner, fmt.Sprintf("n%d.csv", day), wardFile(day, 30)), http.StatusCreated, "nightly upload")
	}
	noStaff := strings.ReplaceAll(wardRows(16, 30), ";"+rawResource+";", ";;")
	e.mustStatus(e.upload("ward", "nightly", partner, "n16.csv", []byte(wardHeader+noStaff)), http.StatusCreated, "upload without staff")
	var alerts []catalog.UploadAlert
	e.decode(e.get("/api/v1/projects/ward/datasets/nightly/alerts", e.admin), &alerts)
	if len(alerts) == 0 {
		t.Fatal("the upload without staff raised no alert")
	}
	return alerts
}

func TestPagesTrendAlerts(t *testing.T) {
	e := newPagesEnv(t)
	alerts := alertDataset(t, e.testEnv)
	b := e.browser(t)
	b.signIn(e.member)
	// The catalog counts the alerts of each site's newest upload.
	cat := b.page("/catalog?q=nightly", http.StatusOK)
	card := between(cat, `data-dataset="ward/nightly"`, "</li>")
	mustHave(t, "catalog card", card, fmt.Sprintf(`<span class="alerts">%d</span>`, len(alerts)))
	mustHave(t, "the other card", between(cat, `data-dataset="ward/events"`, "</li>"), "<dt>Open alerts</dt><dd>none</dd>")
	ds := b.page("/view/ward/nightly", http.StatusOK)
	for _, site := range []string{"*", "ward-3"} {
		id := map[string]string{"*": "trend-all", "ward-3": "trend-ward-3"}[site]
		chart := between(ds, `<svg id="`+id+`"`, "</svg>")
		var n int
		for _, a := range alerts {
			if a.Site == site {
				n = 1 // all of them on the one upload, the seventh
				if a.Seq != 7 {
					t.Errorf("alert on upload %d, want 7", a.Seq)
				}
			}
		}
		if got := strings.Count(chart, `class="mark alert"`); got != n {
			t.Errorf("%s marks %d alerted uploads, want %d", id, got, n)
		}
		if got := strings.Count(chart, `<circle class="mark"`); got != 7-n {
			t.Errorf("%s has %d plain markers, want %d", id, got, 7-n)
		}
	}
	mustHave(t, "alerts list", ds, `<ul id="alerts">`, alerts[0].Sentence)
}
