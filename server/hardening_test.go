package server

import (
	"net/http"
	"strconv"
	"testing"
)

// TestRateLimit checks the per-token bucket: a token's burst goes
// through, the next request answers 429 with Retry-After (RFC 6585
// section 4) naming the limit, another token is not affected, and no
// token is needed for the public routes, which have no bucket.
func TestRateLimit(t *testing.T) {
	e := newEnv(t, func(c *Config) { c.RateLimit, c.RateBurst = 0.5, 3 })
	other := e.token(Grant{Role: RoleAdmin, Subject: "admin-2"})
	for i := range 3 {
		e.mustStatus(e.get("/api/v1/projects", e.admin), 200, "request "+strconv.Itoa(i+1)+" of the burst")
	}
	r := e.get("/api/v1/projects", e.admin)
	e.mustStatus(r, http.StatusTooManyRequests, "over the burst")
	if s, err := strconv.Atoi(r.Header.Get("Retry-After")); err != nil || s < 1 || s > 2 {
		t.Errorf("Retry-After %q, want 1 or 2 seconds at 0.5 requests a second", r.Header.Get("Retry-After"))
	}
	if b := e.apiErr(r); b.Error.Code != "rate_limited" || b.Error.Message == "" {
		t.Errorf("429 body %+v", b.Error)
	}
	e.mustStatus(e.get("/api/v1/projects", other), 200, "another token")
	for range 5 {
		e.mustStatus(e.get("/api/v1/health", ""), 200, "public route")
	}
}

// TestSecurityHeaders checks the headers every answer carries, an error's
// too.
func TestSecurityHeaders(t *testing.T) {
	e := newEnv(t)
	for _, r := range []response{e.get("/api/v1/health", ""), e.get("/api/v1/projects", ""), e.get("/.well-known/jwks.json", "")} {
		for k, want := range map[string]string{"X-Content-Type-Options": "nosniff", "Referrer-Policy": "no-referrer", "X-Frame-Options": "DENY"} {
			if got := r.Header.Get(k); got != want {
				t.Errorf("status %d: %s = %q, want %q", r.Status, k, got, want)
			}
		}
		if r.Header.Get("Strict-Transport-Security") != "" {
			t.Error("HSTS sent over plain HTTP (RFC 6797 section 7.2: only over TLS)")
		}
	}
}
