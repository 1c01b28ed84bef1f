package server

import (
	"fmt"
	"math"
	"net/http"
	"sync"
	"time"

	"github.com/labstack/echo/v4"
	"golang.org/x/time/rate"
)

// Defaults of the per-token request rate (Config.RateLimit, RateBurst):
// common practice for an API whose heaviest clients are scripts pulling
// files, far above what a person or a nightly upload needs.
const (
	DefaultRateLimit = 50  // requests per second, per token
	DefaultRateBurst = 200 // requests at once, per token
)

// securityHeaders sets the response headers every answer carries:
// nosniff (a download is never rendered as something else), no referrer,
// no framing, and, over TLS, HSTS (RFC 6797, one year, common practice).
// A handler may set its own (the pages set their Content-Security-Policy).
func securityHeaders(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		h := c.Response().Header()
		// Every answer carries these: the same values, not copied for
		// each (a value slice of capacity one, so an Add makes its own).
		h["X-Content-Type-Options"] = nosniff
		h["Referrer-Policy"] = noReferrer
		h["X-Frame-Options"] = frameDeny
		if c.Request().TLS != nil {
			h["Strict-Transport-Security"] = hstsYear
		}
		return next(c)
	}
}

var (
	nosniff    = []string{"nosniff"}
	noReferrer = []string{"no-referrer"}
	frameDeny  = []string{"DENY"}
	hstsYear   = []string{"max-age=31536000"}
)

// tokenLimits holds a token bucket (golang.org/x/time/rate) per token id.
// Buckets idle for longer than it takes to refill are dropped, so the map
// holds the tokens active in the last minutes only.
type tokenLimits struct {
	every rate.Limit
	burst int

	mu    sync.Mutex
	byJTI map[string]*tokenLimit
	swept time.Time
}

type tokenLimit struct {
	lim  *rate.Limiter
	used time.Time
}

func newTokenLimits(perSecond float64, burst int) *tokenLimits {
	return &tokenLimits{every: rate.Limit(perSecond), burst: burst, byJTI: map[string]*tokenLimit{}}
}

// allow takes one request of jti's bucket; when empty it says how long
// until the next request would be allowed.
func (t *tokenLimits) allow(jti string, now time.Time) (bool, time.Duration) {
	t.mu.Lock()
	defer t.mu.Unlock()
	idle := time.Duration(float64(t.burst)/float64(t.every)*float64(time.Second)) + time.Minute
	if now.Sub(t.swept) > idle {
		for k, v := range t.byJTI {
			if now.Sub(v.used) > idle {
				delete(t.byJTI, k)
			}
		}
		t.swept = now
	}
	tl := t.byJTI[jti]
	if tl == nil {
		tl = &tokenLimit{lim: rate.NewLimiter(t.every, t.burst)}
		t.byJTI[jti] = tl
	}
	tl.used = now
	r := tl.lim.ReserveN(now, 1)
	if d := r.DelayFrom(now); d > 0 {
		r.CancelAt(now)
		return false, d
	}
	return true, 0
}

// rateLimit answers 429 with Retry-After (RFC 6585 section 4, RFC 9110
// section 10.2.3) to a token over its request rate. It runs after
// authenticate: requests without a valid token never reach a bucket.
func (s *Server) rateLimit(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		if s.limits == nil {
			return next(c)
		}
		cl := claims(c)
		ok, wait := s.limits.allow(cl.ID, time.Now())
		if !ok {
			secs := int(math.Ceil(wait.Seconds()))
			c.Response().Header().Set("Retry-After", fmt.Sprint(secs))
			return fail(http.StatusTooManyRequests, "rate_limited", "this token sent more than %v requests a second (burst %d; flowcat serve --rate-limit, --rate-burst); retry after %d s", float64(s.limits.every), s.limits.burst, secs)
		}
		return next(c)
	}
}
