package server

import (
	"encoding/json"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/golang-jwt/jwt/v5"

	"github.com/flowcat-catalog/flowcat/server/api"
)

// craft signs claims built from a valid admin token's claims after mutate,
// with method and key, so that one claim at a time can be made wrong.
func (e *testEnv) craft(method jwt.SigningMethod, key any, mutate func(*Claims)) string {
	e.t.Helper()
	now := time.Now().Truncate(time.Second)
	c := Claims{
		RegisteredClaims: jwt.RegisteredClaims{
			Issuer:    testIssuer,
			Subject:   "crafted",
			Audience:  jwt.ClaimStrings{Audience},
			ExpiresAt: jwt.NewNumericDate(now.Add(time.Hour)),
			IssuedAt:  jwt.NewNumericDate(now),
			NotBefore: jwt.NewNumericDate(now),
			ID:        "crafted-jti",
		},
		Role: RoleAdmin,
	}
	if mutate != nil {
		mutate(&c)
	}
	s, err := jwt.NewWithClaims(method, c).SignedString(key)
	if err != nil {
		e.t.Fatal(err)
	}
	return s
}

// TestAuthTokens checks that only a well-formed HS256 token of this
// authority, with the registered claims of RFC 7519 section 4.1 (iss, aud,
// exp, nbf, iat, sub, jti) as flowcat requires them, gets through.
func TestAuthTokens(t *testing.T) {
	e := newEnv(t)
	otherKey := []byte("another key, 32 bytes long......")
	past := &Authority{legacy: e.key, keys: &KeySet{}, issuer: testIssuer, now: func() time.Time { return time.Now().Add(-3 * time.Hour) }}
	expired, err := past.Issue(Grant{Role: RoleAdmin, Subject: "old", TTL: time.Hour})
	if err != nil {
		t.Fatal(err)
	}
	foreign, err := NewAuthority(otherKey, testIssuer).Issue(Grant{Role: RoleAdmin, Subject: "x", TTL: time.Hour})
	if err != nil {
		t.Fatal(err)
	}
	wrongIss, err := NewAuthority(e.key, "someone-else").Issue(Grant{Role: RoleAdmin, Subject: "x", TTL: time.Hour})
	if err != nil {
		t.Fatal(err)
	}

	cases := []struct {
		name   string
		header string // the whole Authorization header; "" sends none
		want   int
	}{
		{"valid admin token (control)", "Bearer " + e.admin, http.StatusOK},
		{"scheme is case-insensitive (RFC 6750 section 2.1 / RFC 7235 section 2.1)", "bearer " + e.admin, http.StatusOK},
		{"no Authorization header", "", http.StatusUnauthorized},
		{"Bearer garbage", "Bearer garbage", http.StatusUnauthorized},
		{"Bearer with no token", "Bearer ", http.StatusUnauthorized},
		{"Basic scheme", "Basic YWRtaW46YWRtaW4=", http.StatusUnauthorized},
		{"signed with another key", "Bearer " + foreign, http.StatusUnauthorized},
		{"alg none, unsigned (RFC 7519 section 6.1)", "Bearer " + e.craft(jwt.SigningMethodNone, jwt.UnsafeAllowNoneSignatureType, nil), http.StatusUnauthorized},
		{"HS512 with the same key", "Bearer " + e.craft(jwt.SigningMethodHS512, e.key, nil), http.StatusUnauthorized},
		{"HS384 with the same key", "Bearer " + e.craft(jwt.SigningMethodHS384, e.key, nil), http.StatusUnauthorized},
		{"expired (exp in the past, RFC 7519 section 4.1.4)", "Bearer " + expired, http.StatusUnauthorized},
		{"no exp", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) { c.ExpiresAt = nil }), http.StatusUnauthorized},
		{"nbf in the future (RFC 7519 section 4.1.5)", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) {
			c.NotBefore = jwt.NewNumericDate(time.Now().Add(time.Hour))
		}), http.StatusUnauthorized},
		{"iat in the future (RFC 7519 section 4.1.6)", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) {
			c.IssuedAt = jwt.NewNumericDate(time.Now().Add(time.Hour))
		}), http.StatusUnauthorized},
		{"wrong issuer (RFC 7519 section 4.1.1)", "Bearer " + wrongIss, http.StatusUnauthorized},
		{"wrong audience (RFC 7519 section 4.1.3)", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) {
			c.Audience = jwt.ClaimStrings{"some-other-api"}
		}), http.StatusUnauthorized},
		{"no audience", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) { c.Audience = nil }), http.StatusUnauthorized},
		{"no jti (RFC 7519 section 4.1.7)", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) { c.ID = "" }), http.StatusUnauthorized},
		{"no sub (RFC 7519 section 4.1.2)", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) { c.Subject = "" }), http.StatusUnauthorized},
		{"no iat", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) { c.IssuedAt = nil }), http.StatusUnauthorized},
		{"unknown role", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, func(c *Claims) { c.Role = "root" }), http.StatusUnauthorized},
		{"crafted HS256, all claims right (control)", "Bearer " + e.craft(jwt.SigningMethodHS256, e.key, nil), http.StatusOK},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			e := e.in(t)
			hdr := map[string]string{}
			if tc.header != "" {
				hdr["Authorization"] = tc.header
			}
			r := e.do(http.MethodGet, "/api/v1/projects", "", nil, hdr)
			if r.Status != tc.want {
				t.Fatalf("status %d, want %d; body %s", r.Status, tc.want, clipBody(r.Body))
			}
			if tc.want != http.StatusUnauthorized {
				return
			}
			// RFC 6750 section 3: a 401 carries a Bearer challenge; it
			// names error="invalid_token" when a token was sent (section
			// 3.1) and no error code when none was (section 3).
			wa := r.Header.Get("WWW-Authenticate")
			if !strings.HasPrefix(wa, "Bearer ") || !strings.Contains(wa, `realm="flowcat"`) {
				t.Errorf("WWW-Authenticate = %q, want a Bearer challenge", wa)
			}
			sent := strings.HasPrefix(tc.header, "Bearer ") && len(tc.header) > len("Bearer ")
			if got := strings.Contains(wa, `error="invalid_token"`); got != sent {
				t.Errorf("WWW-Authenticate = %q: invalid_token named %v, want %v", wa, got, sent)
			}
			b := e.apiErr(r)
			if b.Error.Code != "unauthorized" {
				t.Errorf("code %q, want unauthorized", b.Error.Code)
			}
		})
	}
}

// TestAuthScopes checks each role against the routes it may and may not
// use; every 403 has a positive control with the right scope.
func TestAuthScopes(t *testing.T) {
	e := newEnv(t)
	e.createProject("alpha")
	e.createProject("beta")
	e.createDataset("alpha", "visits", "")
	e.createDataset("alpha", "other", "")
	e.createDataset("beta", "visits", "")
	const good = "site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\n"
	for _, ref := range [][2]string{{"alpha", "visits"}, {"beta", "visits"}} {
		e.mustStatus(e.upload(ref[0], ref[1], e.admin, "seed.csv", []byte(good)), http.StatusCreated, "seed upload")
	}

	memberA := e.member("alpha")
	curatorA := e.curator("alpha")
	partnerA := e.partner("alpha/visits")
	dsA := "/api/v1/projects/alpha/datasets/visits"
	dsB := "/api/v1/projects/beta/datasets/visits"
	n := 0
	file := func() string { // a different, valid file per upload
		n++
		return good + "north,c" + string(rune('a'+n)) + ",arrival,2024-01-02T08:00:00Z\n"
	}

	cases := []struct {
		name   string
		method string
		path   string
		token  string
		body   func() string // JSON for POST /projects|datasets, CSV for uploads
		want   int
	}{
		{"member reads own project", "GET", "/api/v1/projects/alpha", memberA, nil, 200},
		{"member reads own versions", "GET", dsA + "/versions", memberA, nil, 200},
		{"member reads own version latest", "GET", dsA + "/versions/latest", memberA, nil, 200},
		{"member of A reads project B", "GET", "/api/v1/projects/beta", memberA, nil, 403},
		{"member of A lists datasets of B", "GET", "/api/v1/projects/beta/datasets", memberA, nil, 403},
		{"member of A reads versions of B", "GET", dsB + "/versions", memberA, nil, 403},
		{"member of A reads B's manifest", "GET", dsB + "/versions/1/manifest", memberA, nil, 403},
		{"member uploads", "POST", dsA + "/uploads", memberA, file, 403},
		{"member creates dataset", "POST", "/api/v1/projects/alpha/datasets", memberA, func() string { return `{"name":"m1"}` }, 403},
		{"partner uploads to its dataset", "POST", dsA + "/uploads", partnerA, file, 201},
		{"partner sees its dataset", "GET", dsA, partnerA, nil, 200},
		{"partner sees its uploads", "GET", dsA + "/uploads", partnerA, nil, 200},
		{"partner uploads to a dataset not in its token", "POST", "/api/v1/projects/alpha/datasets/other/uploads", partnerA, file, 403},
		{"partner uploads to another project", "POST", dsB + "/uploads", partnerA, file, 403},
		{"partner reads versions", "GET", dsA + "/versions", partnerA, nil, 403},
		{"partner reads a version", "GET", dsA + "/versions/1", partnerA, nil, 403},
		{"partner reads a manifest", "GET", dsA + "/versions/1/manifest", partnerA, nil, 403},
		{"partner reads a project", "GET", "/api/v1/projects/alpha", partnerA, nil, 403},
		{"partner sees a dataset not in its token", "GET", "/api/v1/projects/alpha/datasets/other", partnerA, nil, 403},
		{"curator of A creates dataset in A", "POST", "/api/v1/projects/alpha/datasets", curatorA, func() string { return `{"name":"c1"}` }, 201},
		{"curator of A uploads to A", "POST", dsA + "/uploads", curatorA, file, 201},
		{"curator of A creates dataset in B", "POST", "/api/v1/projects/beta/datasets", curatorA, func() string { return `{"name":"c2"}` }, 403},
		{"curator of A uploads to B", "POST", dsB + "/uploads", curatorA, file, 403},
		{"curator of A reads B", "GET", dsB + "/versions", curatorA, nil, 403},
		{"curator creates a project", "POST", "/api/v1/projects", curatorA, func() string { return `{"name":"gamma"}` }, 403},
		{"member creates a project", "POST", "/api/v1/projects", memberA, func() string { return `{"name":"gamma"}` }, 403},
		{"partner creates a project", "POST", "/api/v1/projects", partnerA, func() string { return `{"name":"gamma"}` }, 403},
		{"admin creates a project", "POST", "/api/v1/projects", e.admin, func() string { return `{"name":"gamma"}` }, 201},
		{"admin reads B", "GET", dsB + "/versions", e.admin, nil, 200},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			e := e.in(t)
			var body string
			hdr := map[string]string{}
			if tc.body != nil {
				body = tc.body()
				hdr["Content-Type"] = "application/json"
				if strings.HasSuffix(tc.path, "/uploads") {
					hdr["Content-Type"] = "text/csv"
				}
			}
			r := e.do(tc.method, tc.path, tc.token, strings.NewReader(body), hdr)
			if r.Status != tc.want {
				t.Fatalf("status %d, want %d; body %s", r.Status, tc.want, clipBody(r.Body))
			}
			if tc.want == http.StatusForbidden {
				if b := e.apiErr(r); b.Error.Code != "forbidden" {
					t.Errorf("code %q, want forbidden", b.Error.Code)
				}
			}
		})
	}

	// What a forbidden upload tried must not have happened.
	if got := len(e.versions("beta", "visits")); got != 1 {
		t.Errorf("beta/visits has %d versions after forbidden uploads, want 1", got)
	}
	if got := e.versions("alpha", "other"); len(got) != 0 {
		t.Errorf("alpha/other has %d versions after a forbidden upload, want 0", len(got))
	}

	// Listings are filtered to what the token may see.
	var ps []api.Project
	e.decode(e.get("/api/v1/projects", memberA), &ps)
	if len(ps) != 1 || ps[0].Name != "alpha" {
		t.Errorf("member of alpha lists projects %+v, want alpha only", ps)
	}
	var ds []map[string]any
	e.decode(e.get("/api/v1/projects/alpha/datasets", partnerA), &ds)
	if len(ds) != 1 || ds[0]["name"] != "visits" {
		t.Errorf("partner lists datasets %v, want visits only", ds)
	}
	// A partner learns nothing of projects its token names no dataset of,
	// not even whether they exist.
	e.mustStatus(e.get("/api/v1/projects/beta/datasets", partnerA), http.StatusForbidden, "partner lists another project")
	e.mustStatus(e.get("/api/v1/projects/no-such/datasets", partnerA), http.StatusForbidden, "partner lists a missing project")
}

// TestOpenRoutes checks that health and schema need no token.
func TestOpenRoutes(t *testing.T) {
	e := newEnv(t)
	r := e.get("/api/v1/health", "")
	e.mustStatus(r, http.StatusOK, "health")
	var h map[string]string
	e.decode(r, &h)
	if h["status"] != "ok" || h["schema_version"] == "" {
		t.Errorf("health = %v", h)
	}
	r = e.get("/api/v1/schema", "")
	e.mustStatus(r, http.StatusOK, "schema")
	if !json.Valid(r.Body) {
		t.Fatalf("schema is not valid JSON: %s", clipBody(r.Body))
	}
	var sch map[string]any
	e.decode(r, &sch)
	props, _ := sch["properties"].(map[string]any)
	for _, f := range []string{"site", "case_id", "event_type", "occurred_at"} {
		if _, ok := props[f]; !ok {
			t.Errorf("schema lacks property %s", f)
		}
	}
	if ct := r.Header.Get("Content-Type"); !strings.HasPrefix(ct, "application/schema+json") {
		t.Errorf("schema Content-Type = %q", ct)
	}
}
