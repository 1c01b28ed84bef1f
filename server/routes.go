package server

import (
	"errors"
	"io"
	"net/http"
	"net/url"
	"slices"
	"strings"
	"time"

	"github.com/labstack/echo/v4"
)

// route is one endpoint: its method, path pattern (":name" matches one
// segment), handler, whether it needs no token, and the query parameters
// it takes ("name*" may repeat). Any other parameter is refused, so a
// misspelt filter cannot silently widen an answer. A page is for people:
// its token comes from the session cookie, its errors are HTML, and its
// POSTs need the form token (pages.go).
type route struct {
	method, path string
	h            echo.HandlerFunc
	public       bool
	page         bool
	params       []string
}

// maxQueryPairs bounds the pairs of one query string.
const maxQueryPairs = 64

// wellFormedQuery refuses a query string that does not split cleanly into
// name=value pairs joined by "&" (RFC 3986 section 3.4 leaves the form to
// the application; this is the form of HTML's
// application/x-www-form-urlencoded): a pair holding ";" (which Go's
// parser would drop, and with it a filter), a bad percent-escape, an empty
// name. Every request passes here before routing.
func wellFormedQuery(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		if err := checkQuery(c.Request().URL.RawQuery); err != nil {
			return err
		}
		return next(c)
	}
}

// checkQuery is wellFormedQuery's rule: nil when every pair of raw reads
// back, so that url.ParseQuery keeps them all.
func checkQuery(raw string) error {
	if raw == "" {
		return nil
	}
	pairs := strings.Split(raw, "&")
	if len(pairs) > maxQueryPairs {
		return fail(http.StatusBadRequest, "invalid", "query: %d pairs, more than the limit of %d", len(pairs), maxQueryPairs)
	}
	for _, p := range pairs {
		if p == "" {
			continue
		}
		bad := func(why string) error {
			return fail(http.StatusBadRequest, "invalid", "query: pair %q: %s", truncateParam(p), why)
		}
		if strings.Contains(p, ";") {
			return bad(`holds ";": join parameters with "&" and percent-encode ";" in a value as %3B`)
		}
		k, v, _ := strings.Cut(p, "=")
		name, err := url.QueryUnescape(k)
		if err != nil {
			return bad("the name is not percent-encoded correctly")
		}
		if name == "" {
			return bad("no parameter name")
		}
		if _, err := url.QueryUnescape(v); err != nil {
			return bad("the value is not percent-encoded correctly")
		}
	}
	return nil
}

// knownParams refuses parameters the route does not take, and a repeated
// one that takes a single value.
func knownParams(params []string) echo.MiddlewareFunc {
	names := make([]string, len(params))
	for i, p := range params {
		names[i] = strings.TrimSuffix(p, "*")
	}
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			for k, vs := range c.QueryParams() {
				i := slices.Index(names, k)
				if i < 0 {
					if len(names) == 0 {
						return fail(http.StatusBadRequest, "invalid", "unknown parameter %q: this endpoint takes no query parameters", truncateParam(k))
					}
					return fail(http.StatusBadRequest, "invalid", "unknown parameter %q: want %s", truncateParam(k), strings.Join(names, ", "))
				}
				if len(vs) > 1 && !strings.HasSuffix(params[i], "*") {
					return fail(http.StatusBadRequest, "invalid", "parameter %q given %d times: it takes one value", k, len(vs))
				}
			}
			return next(c)
		}
	}
}

// notFound answers a request no route took: 405 with Allow when the path
// is an endpoint's under another method (RFC 9110 section 15.5.6), else
// 404.
func (s *Server) notFound(c echo.Context) error {
	var allow []string
	for _, r := range s.routes {
		if matchPath(r.path, c.Request().URL.Path) && !slices.Contains(allow, r.method) {
			allow = append(allow, r.method)
		}
	}
	if len(allow) == 0 {
		return fail(http.StatusNotFound, "not_found", "no such endpoint: %s", truncateParam(c.Request().URL.Path))
	}
	slices.Sort(allow)
	c.Response().Header().Set("Allow", strings.Join(allow, ", "))
	return fail(http.StatusMethodNotAllowed, "method_not_allowed", "%s is not allowed here: use %s", c.Request().Method, strings.Join(allow, " or "))
}

// matchPath reports whether path matches pattern, whose ":name" segments
// match any one non-empty segment.
func matchPath(pattern, path string) bool {
	ps, xs := strings.Split(pattern, "/"), strings.Split(path, "/")
	if len(ps) != len(xs) {
		return false
	}
	for i := range ps {
		if strings.HasPrefix(ps[i], ":") {
			if xs[i] == "" {
				return false
			}
			continue
		}
		if ps[i] != xs[i] {
			return false
		}
	}
	return true
}

// idleBodies bounds the wait for each byte of a request body (a read
// deadline on the connection, BodyIdleTimeout after each read): a client
// that stalls mid-body gets 408, however long a steady upload takes. At
// the end of the body the deadline is lifted, so that net/http's watch
// for a closed connection during a long answer is not cut short.
//
// A handler that fails with the body unread: so that the client, still
// sending, reads the answer rather than a reset connection, the rest of
// the body is read and dropped, up to drainBytes; past that, or when the
// body is the problem (too large, stalled, the client gone), it is
// closed, which tells net/http not to read it and to close the
// connection after the answer.
func (s *Server) idleBodies(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		req := c.Request()
		if req.Body == nil || req.Body == http.NoBody {
			return next(c)
		}
		b := &idleBody{ReadCloser: req.Body, rc: http.NewResponseController(c.Response().Writer), idle: s.cfg.BodyIdleTimeout}
		req.Body = b
		err := next(c)
		if err != nil && !b.eof {
			var he *httpError
			status := http.StatusInternalServerError
			if errors.As(err, &he) {
				status = he.body.Status
			}
			switch status {
			case http.StatusRequestEntityTooLarge, http.StatusRequestTimeout, statusClientGone:
			default:
				io.CopyN(io.Discard, b, drainBytes)
			}
			if !b.eof {
				b.Close()
			}
		}
		if !b.eof {
			b.rc.SetReadDeadline(time.Time{})
		}
		return err
	}
}

// drainBytes bounds what is read and dropped of a refused request's body.
const drainBytes = 64 << 20

// statusClientGone is the access log's status of a request whose client
// went away (499 is common practice for this, not a standard code).
const statusClientGone = 499

type idleBody struct {
	io.ReadCloser
	rc   *http.ResponseController
	idle time.Duration
	eof  bool
}

func (b *idleBody) Read(p []byte) (int, error) {
	if !b.eof {
		b.rc.SetReadDeadline(time.Now().Add(b.idle))
	}
	n, err := b.ReadCloser.Read(p)
	if err == io.EOF && !b.eof {
		b.eof = true
		b.rc.SetReadDeadline(time.Time{})
	}
	return n, err
}
