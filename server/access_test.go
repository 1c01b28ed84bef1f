package server

import (
	"archive/zip"
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// matrixRoles are the principals of the access matrix: no token, an
// admin, a curator of alpha, a curator of beta, a member of alpha and a
// partner of alpha's datasets.
var matrixRoles = []string{"none", "admin", "cur-a", "cur-b", "mem-a", "part-a"}

// TestAccessMatrix sends every endpoint this work added (audit trail,
// project tokens, dataset and project changes, partner scoping) with every
// principal, and asserts each status. Where a request changes state, each
// principal acts on a dataset (or project) of its own, so that one cell's
// success does not decide another's answer. Every 403 names the refusal
// in its body and leaves a "denied" entry in the audit trail.
func TestAccessMatrix(t *testing.T) {
	e := newEnv(t)
	e.createProject("alpha")
	e.createProject("beta")
	const good = "site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\n"
	// Per principal: an unpublished dataset, an archived one, and one with
	// a published version; a scratch project for the admin's project
	// changes.
	var partnerDS []string
	for _, r := range matrixRoles {
		e.createDataset("alpha", "d-"+r, "")
		e.createDataset("alpha", "arch-"+r, "")
		e.createDataset("alpha", "pub-"+r, "")
		e.mustStatus(e.upload("alpha", "pub-"+r, e.admin, "seed.csv", []byte(good)), 201, "seed")
		e.mustStatus(e.postJSON("/api/v1/projects/alpha/datasets/arch-"+r+"/archive", e.admin, map[string]string{"reason": "setup"}), 200, "archive")
		partnerDS = append(partnerDS, "alpha/d-"+r, "alpha/arch-"+r, "alpha/pub-"+r)
	}
	for _, p := range []string{"scratch-archive", "scratch-unarchive", "scratch-delete"} {
		e.createProject(p)
	}
	e.mustStatus(e.postJSON("/api/v1/projects/scratch-unarchive/archive", e.admin, map[string]string{}), 200, "archive project")

	tokens := map[string]string{
		"none":   "",
		"admin":  e.admin,
		"cur-a":  e.curator("alpha"),
		"cur-b":  e.curator("beta"),
		"mem-a":  e.member("alpha"),
		"part-a": e.partner(partnerDS...),
	}
	// A member token of alpha per principal, to revoke.
	victims := map[string]string{}
	for _, r := range matrixRoles {
		tok := e.token(Grant{Role: RoleMember, Subject: "victim-" + r, Project: "alpha"})
		c, err := e.auth.Verify(tok)
		if err != nil {
			t.Fatal(err)
		}
		victims[r] = c.ID
	}

	adminClaims, err := e.auth.Verify(e.admin)
	if err != nil {
		t.Fatal(err)
	}
	const api, alpha = "/api/v1", "/api/v1/projects/alpha"
	ds := func(prefix string) func(string) string {
		return func(r string) string { return alpha + "/datasets/" + prefix + r }
	}
	fixed := func(p string) func(string) string { return func(string) string { return p } }
	// want lists the statuses of admin, cur-a, cur-b, mem-a, part-a; no
	// token is 401 everywhere.
	cases := []struct {
		name, method string
		path         func(role string) string
		body         string
		want         [5]int
	}{
		{"audit", "GET", fixed(api + "/audit"), "", [5]int{200, 200, 200, 403, 403}},
		{"audit of alpha", "GET", fixed(api + "/audit?project=alpha"), "", [5]int{200, 200, 403, 403, 403}},
		{"audit export of alpha", "GET", fixed(api + "/audit/export?project=alpha"), "", [5]int{200, 200, 403, 403, 403}},
		{"audit export, no project", "GET", fixed(api + "/audit/export"), "", [5]int{200, 200, 200, 403, 403}},
		{"project tokens list", "GET", fixed(alpha + "/tokens"), "", [5]int{200, 200, 403, 403, 403}},
		{"project tokens issue member", "POST", fixed(alpha + "/tokens"), `{"role":"member","subject":"s","ttl":"1h"}`, [5]int{201, 201, 403, 403, 403}},
		{"project tokens issue partner", "POST", fixed(alpha + "/tokens"), `{"role":"partner","subject":"s","datasets":["d-admin"],"ttl":"1h"}`, [5]int{201, 201, 403, 403, 403}},
		{"project tokens issue partner of beta", "POST", fixed(alpha + "/tokens"), `{"role":"partner","subject":"s","datasets":["beta/x"],"ttl":"1h"}`, [5]int{403, 403, 403, 403, 403}},
		{"project tokens issue curator", "POST", fixed(alpha + "/tokens"), `{"role":"curator","subject":"s","ttl":"1h"}`, [5]int{403, 403, 403, 403, 403}},
		{"project tokens revoke", "POST", func(r string) string { return alpha + "/tokens/" + victims[r] + "/revoke" }, `{"reason":"left"}`, [5]int{200, 200, 403, 403, 403}},
		{"project tokens revoke an admin token", "POST", func(string) string { return alpha + "/tokens/" + adminClaims.ID + "/revoke" }, `{"reason":"x"}`, [5]int{404, 404, 403, 403, 403}},
		{"project edit", "PATCH", fixed(alpha), `{"title":"Alpha"}`, [5]int{200, 200, 403, 403, 403}},
		{"project archive", "POST", func(r string) string {
			if r == "admin" {
				return api + "/projects/scratch-archive/archive"
			}
			return alpha + "/archive"
		}, `{"reason":"done"}`, [5]int{200, 403, 403, 403, 403}},
		{"project unarchive", "POST", func(r string) string {
			if r == "admin" {
				return api + "/projects/scratch-unarchive/unarchive"
			}
			return alpha + "/unarchive"
		}, "", [5]int{200, 403, 403, 403, 403}},
		{"project delete", "POST", func(r string) string {
			if r == "admin" {
				return api + "/projects/scratch-delete/delete"
			}
			return alpha + "/delete"
		}, `{"reason":"ended"}`, [5]int{200, 403, 403, 403, 403}},
		{"projects incl. archived", "GET", fixed(api + "/projects?archived=true"), "", [5]int{200, 200, 200, 200, 200}},
		{"datasets incl. archived", "GET", fixed(alpha + "/datasets?archived=true"), "", [5]int{200, 200, 403, 200, 200}},
		{"dataset edit", "PATCH", ds("d-"), `{"title":"T","reject_above":0.1}`, [5]int{200, 200, 403, 403, 403}},
		{"dataset edit of an archived one", "PATCH", ds("arch-"), `{"title":"T"}`, [5]int{409, 409, 403, 403, 403}},
		{"dataset get", "GET", ds("d-"), "", [5]int{200, 200, 403, 200, 200}},
		{"dataset profile revisions", "GET", func(r string) string { return ds("d-")(r) + "/profiles" }, "", [5]int{200, 200, 403, 200, 200}},
		{"dataset archive", "POST", func(r string) string { return ds("d-")(r) + "/archive" }, `{"reason":"closed"}`, [5]int{200, 200, 403, 403, 403}},
		{"dataset unarchive", "POST", func(r string) string { return ds("arch-")(r) + "/unarchive" }, "", [5]int{200, 200, 403, 403, 403}},
		{"dataset delete, published", "POST", func(r string) string { return ds("pub-")(r) + "/delete" }, `{"reason":"consent withdrawn"}`, [5]int{200, 409, 403, 403, 403}},
		{"dataset delete, never published", "POST", func(r string) string { return ds("d-")(r) + "/delete" }, `{"reason":"made by mistake"}`, [5]int{200, 200, 403, 403, 403}},
		// The admin deleted pub-admin above (409 now); the curator's
		// delete was refused, so its dataset takes the upload.
		{"upload replace-all", "POST", func(r string) string { return ds("pub-")(r) + "/uploads?mode=replace-all" }, good + "north,c2,arrival,2024-01-02T08:00:00Z\n", [5]int{409, 201, 403, 403, 403}},
		{"uploads list", "GET", func(r string) string { return ds("pub-")(r) + "/uploads" }, "", [5]int{200, 200, 403, 200, 200}},
	}
	denied := 0
	for _, tc := range cases {
		for i, role := range matrixRoles {
			want := http.StatusUnauthorized
			if i > 0 {
				want = tc.want[i-1]
			}
			t.Run(tc.name+"/"+role, func(t *testing.T) {
				e := e.in(t)
				hdr := map[string]string{}
				if tc.body != "" {
					hdr["Content-Type"] = "application/json"
					if strings.Contains(tc.path(role), "/uploads") {
						hdr["Content-Type"] = "text/csv"
					}
				}
				r := e.do(tc.method, tc.path(role), tokens[role], strings.NewReader(tc.body), hdr)
				if r.Status != want {
					t.Fatalf("%s %s: status %d, want %d; body %s", tc.method, tc.path(role), r.Status, want, clipBody(r.Body))
				}
				if want == http.StatusForbidden {
					if b := e.apiErr(r); b.Error.Code != "forbidden" || !strings.Contains(b.Error.Message, "may not") {
						t.Errorf("403 body %s does not say what was refused", clipBody(r.Body))
					}
				}
			})
			if want == http.StatusForbidden {
				denied++
			}
		}
	}
	n := 0
	err = e.store.EachAudit(context.Background(), catalog.AuditFilter{Outcome: catalog.OutcomeDenied, Limit: 100}, func(a catalog.AuditEntry) error {
		n++
		if a.By == "" || a.TokenID == "" || a.From == "" || !strings.HasPrefix(a.Action, "denied.") {
			t.Errorf("denied entry %+v lacks who, token, where or action", a)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n != denied {
		t.Errorf("%d denied entries in the audit trail, %d requests refused", n, denied)
	}
}

// TestAuditTrailEndToEnd runs the actions a data-protection officer asks
// about over HTTP (a curator issues a partner token; the partner uploads,
// tries replace-all and is refused; the curator publishes; a member
// downloads, exports and bundles; the curator changes the profile,
// retracts, revokes and archives) and checks that each left its entry,
// with who (subject and jti), from where and the outcome; that the
// JSON Lines export reads back line by line and holds none of the raw
// identifiers planted in the upload, nor any token; that paging over the
// API returns the same entries; and that a curator sees its project's
// entries only.
func TestAuditTrailEndToEnd(t *testing.T) {
	e := newEnv(t)
	e.createProject("alpha")
	e.createProject("beta")
	r := e.postJSON("/api/v1/projects/alpha/datasets", e.admin, map[string]any{"name": "visits", "drafts": true})
	e.mustStatus(r, 201, "create dataset")
	cur, curB, mem := e.curator("alpha"), e.curator("beta"), e.member("alpha")
	ds := "/api/v1/projects/alpha/datasets/visits"

	issue := func(subject string) string {
		r := e.postJSON("/api/v1/projects/alpha/tokens", cur, map[string]any{"role": "partner", "subject": subject, "datasets": []string{"visits"}, "ttl": "24h"})
		e.mustStatus(r, 201, "curator issues a partner token")
		var out struct{ Token string }
		e.decode(r, &out)
		return out.Token
	}
	north, south := issue("north-clinic"), issue("south-clinic")

	// Raw identifiers that must never reach the trail.
	planted := []string{"PATIENT-RAW-777", "DR-RAW-555", "PATIENT-RAW-888"}
	file := "site,case_id,resource_id,event_type,occurred_at\n" +
		"north,PATIENT-RAW-777,DR-RAW-555,arrival,2024-01-01T08:00:00Z\n" +
		"north,PATIENT-RAW-777,DR-RAW-555,departure,2024-01-01T09:00:00Z\n"
	e.mustStatus(e.upload("alpha", "visits", north, "PATIENT-RAW-777.csv", []byte(file)), 201, "north uploads")
	e.mustStatus(e.upload("alpha", "visits", south, "south.csv", []byte("site,case_id,event_type,occurred_at\nsouth,PATIENT-RAW-888,arrival,2024-01-02T08:00:00Z\n")), 201, "south uploads")
	r = e.do("POST", ds+"/uploads?mode=replace-all", north, strings.NewReader(file), map[string]string{"Content-Type": "text/csv"})
	e.mustStatus(r, 403, "partner replace-all")
	if b := e.apiErr(r); !strings.Contains(b.Error.Message, "replace-all") || !strings.Contains(b.Error.Message, "append") {
		t.Errorf("replace-all refusal %q does not name the mode and the way", b.Error.Message)
	}

	// A partner sees its own upload records only; the curator sees both.
	var ups []catalog.Upload
	e.decode(e.get(ds+"/uploads", north), &ups)
	if len(ups) != 1 || ups[0].By != "north-clinic" {
		t.Fatalf("north sees uploads %+v, want its own only", ups)
	}
	e.decode(e.get(ds+"/uploads", cur), &ups)
	if len(ups) != 2 {
		t.Fatalf("curator sees %d uploads, want 2", len(ups))
	}

	e.mustStatus(e.postJSON(ds+"/versions/2/publish", cur, map[string]any{}), 200, "publish")
	var v catalog.Version
	e.decode(e.get(ds+"/versions/2", mem), &v)
	e.mustStatus(e.get(ds+"/versions/2/files/"+v.Manifest.Files[0].SHA256.String(), mem), 200, "download")
	e.mustStatus(e.get(ds+"/versions/2/export?format=csv&site=north", mem), 200, "export")
	e.mustStatus(e.get(ds+"/versions/2/bundle", mem), 200, "bundle")
	prof := "fields:\n  site: \"Site\"\n  case_id: \"Case\"\n  event_type: \"Kind\"\n  occurred_at: \"When\"\n"
	r = e.do("PATCH", ds, cur, strings.NewReader(`{"profile":`+jsonString(prof)+`}`), map[string]string{"Content-Type": "application/json"})
	e.mustStatus(r, 200, "profile change")
	e.mustStatus(e.postJSON(ds+"/versions/1/retract", cur, map[string]string{"reason": "sent twice"}), 200, "retract")
	nc, _ := e.auth.Verify(north)
	e.mustStatus(e.postJSON("/api/v1/projects/alpha/tokens/"+nc.ID+"/revoke", cur, map[string]string{"reason": "contract ended"}), 200, "revoke")
	e.mustStatus(e.get(ds, north), 401, "revoked partner")
	e.mustStatus(e.postJSON(ds+"/archive", cur, map[string]string{"reason": "study closed"}), 200, "archive")
	e.mustStatus(e.upload("alpha", "visits", south, "late.csv", []byte(file)), 409, "upload to an archived dataset")

	r = e.get("/api/v1/audit/export", e.admin)
	e.mustStatus(r, 200, "audit export")
	if ct := r.Header.Get("Content-Type"); ct != "application/x-ndjson" {
		t.Errorf("export Content-Type %q", ct)
	}
	for _, secret := range append(planted, north, south, cur, mem, e.admin) {
		if bytes.Contains(r.Body, []byte(secret)) {
			t.Fatalf("the audit export holds %.20q...", secret)
		}
	}
	var entries []catalog.AuditEntry
	sc := bufio.NewScanner(bytes.NewReader(r.Body))
	for sc.Scan() {
		var a catalog.AuditEntry
		if err := json.Unmarshal(sc.Bytes(), &a); err != nil {
			t.Fatalf("export line %d is not JSON: %v", len(entries)+1, err)
		}
		entries = append(entries, a)
	}
	t.Logf("audit export: %d entries, %d bytes (%d bytes an entry)", len(entries), len(r.Body), len(r.Body)/max(len(entries), 1))
	seen := map[string]catalog.AuditEntry{} // action -> its last entry, the test env's own token issues left out
	for _, a := range entries {
		if a.By != "test" {
			seen[a.Action] = a
		}
	}
	want := map[string]string{ // action -> who
		"token.issue": "curator-alpha", "version.create": "south-clinic", "denied.post.datasets.uploads": "north-clinic",
		"version.publish": "curator-alpha", "version.download": "member-alpha", "version.export": "member-alpha",
		"version.bundle": "member-alpha", "dataset.edit": "curator-alpha", "version.retract": "curator-alpha",
		"token.revoke": "curator-alpha", "dataset.archive": "curator-alpha",
	}
	for action, by := range want {
		a, ok := seen[action]
		if !ok {
			t.Errorf("no %s entry; actions %v", action, keys(seen))
			continue
		}
		if a.By != by || a.TokenID == "" || a.From == "" || a.Project != "alpha" {
			t.Errorf("%s entry %+v: want by %s with jti, address and project", action, a, by)
		}
	}
	if a := seen["denied.post.datasets.uploads"]; a.Outcome != catalog.OutcomeDenied {
		t.Errorf("refused replace-all recorded with outcome %q", a.Outcome)
	}
	if a := seen["dataset.edit"]; !strings.Contains(a.Detail, "profile revision 2") {
		t.Errorf("profile change entry %+v does not name the revision", a)
	}

	// Paging over the API gives the same entries (the export's own entry,
	// written before it streamed, included).
	var paged []catalog.AuditEntry
	after := ""
	for {
		var page api.AuditPage
		e.decode(e.get("/api/v1/audit?limit=3&after="+after, e.admin), &page)
		paged = append(paged, page.Entries...)
		if page.NextAfter == "" {
			break
		}
		after = page.NextAfter
	}
	if len(paged) != len(entries) || paged[len(paged)-1].Action != "audit.export" {
		t.Fatalf("paged %d entries, exported %d, the last %+v", len(paged), len(entries), paged[len(paged)-1])
	}
	for i := range entries {
		if paged[i].ID != entries[i].ID {
			t.Fatalf("entry %d: paged %s, exported %s", i, paged[i].ID, entries[i].ID)
		}
	}

	// Curators see their own project's entries only.
	var page api.AuditPage
	e.decode(e.get("/api/v1/audit?limit=1000", cur), &page)
	if len(page.Entries) == 0 {
		t.Fatal("curator of alpha sees no entries")
	}
	for _, a := range page.Entries {
		if a.Project != "alpha" {
			t.Fatalf("curator of alpha sees %+v", a)
		}
	}
	e.decode(e.get("/api/v1/audit?limit=1000&action=version.", curB), &page)
	if len(page.Entries) != 0 {
		t.Fatalf("curator of beta sees alpha's entries: %+v", page.Entries)
	}
	e.mustStatus(e.get("/api/v1/audit?project=alpha", curB), 403, "curator of beta asks for alpha")
	e.mustStatus(e.get("/api/v1/audit?limit=5000", e.admin), 400, "limit above the maximum")
	e.mustStatus(e.get("/api/v1/audit?after=xyz", e.admin), 400, "bad cursor")
	e.mustStatus(e.get("/api/v1/audit?outcome=maybe", e.admin), 400, "unknown outcome")
	e.mustStatus(e.get("/api/v1/audit?dataset=visits", e.admin), 400, "dataset without project")
	e.mustStatus(e.get("/api/v1/audit?who=x", e.admin), 400, "unknown parameter")
}

// TestBundleDictionaryRevision checks that a bundle's data dictionary
// describes the profile revision its version was read with, before and
// after a profile change.
func TestBundleDictionaryRevision(t *testing.T) {
	e := newEnv(t)
	e.createProject("alpha")
	e.createDataset("alpha", "visits", "")
	ds := "/api/v1/projects/alpha/datasets/visits"
	e.mustStatus(e.upload("alpha", "visits", e.admin, "a.csv", []byte("site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\n")), 201, "upload 1")
	prof := "fields:\n  site: \"Site\"\n  case_id: \"Case\"\n  event_type: \"Kind\"\n  occurred_at: \"When\"\n"
	e.mustStatus(e.do("PATCH", ds, e.admin, strings.NewReader(`{"profile":`+jsonString(prof)+`}`), map[string]string{"Content-Type": "application/json"}), 200, "profile change")
	e.mustStatus(e.upload("alpha", "visits", e.admin, "b.csv", []byte("Site,Case,Kind,When\nnorth,c2,arrival,2024-02-01T08:00:00Z\n")), 201, "upload 2")
	for n, want := range map[int]string{1: "Profile revision: 1", 2: "Profile revision: 2"} {
		r := e.get(ds+"/versions/"+string(rune('0'+n))+"/bundle?format=zip", e.admin)
		e.mustStatus(r, 200, "bundle")
		dict := zipMember(t, r.Body, "DICTIONARY.md")
		if !strings.Contains(dict, want) {
			t.Errorf("version %d: dictionary lacks %q", n, want)
		}
		if n == 1 && strings.Contains(dict, `"When"`) || n == 2 && !strings.Contains(dict, `"When"`) {
			t.Errorf("version %d: dictionary shows the wrong profile:\n%s", n, dict)
		}
	}
	var revs struct {
		Revisions []catalog.ProfileRevision `json:"revisions"`
	}
	e.decode(e.get(ds+"/profiles", e.admin), &revs)
	if len(revs.Revisions) != 2 || revs.Revisions[1].Profile != prof {
		t.Fatalf("revisions %+v", revs)
	}
}

func jsonString(s string) string { b, _ := json.Marshal(s); return string(b) }

func keys[V any](m map[string]V) []string {
	var out []string
	for k := range m {
		out = append(out, k)
	}
	return out
}

// zipMember returns the member of a zip archive whose name ends in name.
func zipMember(t *testing.T, b []byte, name string) string {
	t.Helper()
	zr, err := zip.NewReader(bytes.NewReader(b), int64(len(b)))
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range zr.File {
		if strings.HasSuffix(f.Name, name) {
			rc, err := f.Open()
			if err != nil {
				t.Fatal(err)
			}
			defer rc.Close()
			data, err := io.ReadAll(rc)
			if err != nil {
				t.Fatal(err)
			}
			return string(data)
		}
	}
	t.Fatalf("no %s in the zip", name)
	return ""
}

// TestPartnerSites checks that a partner token bound to its sites has an
// upload naming another site refused whole (403, rule site_not_allowed,
// naming the line and the site), that nothing of it is stored, and that
// an upload of its own site goes through; a token without sites is
// unbound. The binding is recorded with the token.
func TestPartnerSites(t *testing.T) {
	e := newEnv(t)
	e.createProject("alpha")
	e.createDataset("alpha", "visits", "")
	cur := e.curator("alpha")
	r := e.postJSON("/api/v1/projects/alpha/tokens", cur, map[string]any{"role": "partner", "subject": "north-clinic", "datasets": []string{"visits"}, "sites": []string{"north"}, "ttl": "1h"})
	e.mustStatus(r, 201, "issue a site-bound partner token")
	var out struct{ Token string }
	e.decode(r, &out)
	north := out.Token
	mixed := "site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\nsouth,c2,arrival,2024-01-01T08:05:00Z\n"
	r = e.upload("alpha", "visits", north, "mixed.csv", []byte(mixed))
	e.mustStatus(r, 403, "partner writes another site")
	b := e.apiErr(r)
	if b.Error.Rule != catalog.RuleSiteNotAllowed || b.Error.Line != 3 || b.Error.Column != "site" || !strings.Contains(b.Error.Message, `"south"`) {
		t.Fatalf("refusal %+v does not name rule, line, column and site", b.Error)
	}
	if got := e.versions("alpha", "visits"); len(got) != 0 {
		t.Fatalf("a refused upload made %d versions", len(got))
	}
	e.mustStatus(e.upload("alpha", "visits", north, "own.csv", []byte("site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\n")), 201, "own site")
	e.mustStatus(e.upload("alpha", "visits", e.partner("alpha/visits"), "any.csv", []byte(mixed)), 201, "unbound partner")
	var list struct {
		Tokens []catalog.TokenRecord `json:"tokens"`
	}
	e.decode(e.get("/api/v1/projects/alpha/tokens", cur), &list)
	found := false
	for _, tk := range list.Tokens {
		if tk.Subject == "north-clinic" {
			found = len(tk.Sites) == 1 && tk.Sites[0] == "north"
		}
	}
	if !found {
		t.Fatalf("the token's record lacks its sites: %+v", list.Tokens)
	}
	e.mustStatus(e.postJSON("/api/v1/admin/tokens", e.admin, map[string]any{"role": "member", "subject": "m", "project": "alpha", "sites": []string{"north"}, "ttl": "1h"}), 400, "sites on a member token")
}

// TestPartnerReplaceGrant checks the curator's grant of replace to a
// partner bound to sites: it replaces a window of its own site (the
// other site's events stay), is refused naming the site for another
// site's window and for replace-all; the grant needs sites.
func TestPartnerReplaceGrant(t *testing.T) {
	e := newEnv(t)
	e.createProject("alpha")
	e.createDataset("alpha", "visits", "")
	cur := e.curator("alpha")
	issue := func(body map[string]any, want int) string {
		t.Helper()
		r := e.postJSON("/api/v1/projects/alpha/tokens", cur, body)
		e.mustStatus(r, want, "issue")
		var out struct{ Token string }
		if want == 201 {
			e.decode(r, &out)
		}
		return out.Token
	}
	north := issue(map[string]any{"role": "partner", "subject": "north", "datasets": []string{"visits"}, "sites": []string{"north"}, "replace": true, "ttl": "1h"}, 201)
	issue(map[string]any{"role": "partner", "subject": "x", "datasets": []string{"visits"}, "replace": true, "ttl": "1h"}, 400)
	base := "site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\nsouth,c2,arrival,2024-01-01T08:05:00Z\n"
	e.mustStatus(e.upload("alpha", "visits", e.admin, "base.csv", []byte(base)), 201, "base")
	ds := "/api/v1/projects/alpha/datasets/visits/uploads?mode=replace-window&from=2024-01-01T00:00:00Z&to=2024-01-02T00:00:00Z"
	fixed := "site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:01:00Z\n"
	r := e.do("POST", ds+"&site=south", north, strings.NewReader(fixed), map[string]string{"Content-Type": "text/csv"})
	e.mustStatus(r, 403, "replace another site's window")
	if b := e.apiErr(r); !strings.Contains(b.Error.Message, `"south"`) {
		t.Errorf("refusal %q does not name the site", b.Error.Message)
	}
	e.mustStatus(e.do("POST", "/api/v1/projects/alpha/datasets/visits/uploads?mode=replace-all", north, strings.NewReader(fixed), nil), 403, "replace-all with the grant")
	r = e.do("POST", ds+"&site=north", north, strings.NewReader(fixed), map[string]string{"Content-Type": "text/csv"})
	e.mustStatus(r, 201, "replace its own site's window")
	var up api.UploadResult
	e.decode(r, &up)
	if up.Version.Manifest.Rows != 2 || up.Version.Manifest.Lineage.RowsRemoved != 1 {
		t.Fatalf("after the replace: %d rows, %d removed; want 2 and 1 (south kept)", up.Version.Manifest.Rows, up.Version.Manifest.Lineage.RowsRemoved)
	}
	e.mustStatus(e.do("POST", ds, e.partner("alpha/visits"), strings.NewReader(fixed), nil), 403, "replace-window without the grant")
}
