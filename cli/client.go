package cli

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"strconv"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// client talks to a flowcat server.
type client struct {
	base  *url.URL
	token string
	http  *http.Client
}

func (e *env) client() (*client, error) {
	if e.server == "" {
		e.server = os.Getenv("FLOWCAT_SERVER")
	}
	if e.token == "" {
		e.token = os.Getenv("FLOWCAT_TOKEN")
	}
	if e.server == "" {
		return nil, usageErr("no server: give --server URL or set FLOWCAT_SERVER")
	}
	u, err := url.Parse(strings.TrimRight(e.server, "/"))
	if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
		return nil, usageErr("server %q: want http://HOST:PORT or https://HOST", e.server)
	}
	if e.token == "" {
		return nil, usageErr("no token: give --token or set FLOWCAT_TOKEN (an admin makes one with flowcat token issue)")
	}
	return &client{base: u, token: e.token, http: &http.Client{}}, nil
}

// apiError is an error answer of the server, read from its problem
// details (api.Problem): the status, the code extension and the detail
// (as Message), with the rule, line, column and upload of a refused
// upload.
type apiError struct{ api.ErrorBody }

func (e *apiError) Error() string {
	return fmt.Sprintf("server said %d %s: %s", e.Status, e.Code, e.Message)
}

// problemError reads an error answer's body: problem details (RFC 9457)
// with flowcat's extensions, or, from a server or proxy that sent
// something else, the status and the body's text.
func problemError(status int, data []byte) *apiError {
	var p api.Problem
	if json.Unmarshal(data, &p) != nil || p.Status == 0 || p.Code == "" {
		return &apiError{api.ErrorBody{Status: status, Code: "http", Message: strings.TrimSpace(string(data))}}
	}
	return &apiError{api.ErrorBody{Status: p.Status, Code: p.Code, Message: p.Detail, Rule: p.Rule, Line: p.Line, Column: p.Column, Upload: p.Upload}}
}

func (c *client) url(path string, q url.Values) string {
	u := *c.base
	u.Path = c.base.Path + "/api/v1" + path
	u.RawQuery = q.Encode()
	return u.String()
}

// do sends a request and returns the response when its status is 2xx (or
// 206); else it decodes the error body into an *apiError.
func (c *client) do(ctx context.Context, method, path string, q url.Values, body io.Reader, hdr http.Header) (*http.Response, error) {
	req, err := http.NewRequestWithContext(ctx, method, c.url(path, q), body)
	if err != nil {
		return nil, err
	}
	for k, v := range hdr {
		req.Header[k] = v
	}
	req.Header.Set("Authorization", "Bearer "+c.token)
	if req.Header.Get("Content-Type") == "" && body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	if sz, ok := body.(interface{ Len() int }); ok {
		req.ContentLength = int64(sz.Len())
	}
	if n := hdr.Get("Content-Length"); n != "" {
		req.ContentLength, _ = strconv.ParseInt(n, 10, 64)
	}
	resp, err := c.http.Do(req)
	if err != nil {
		return nil, fmt.Errorf("cannot reach %s: %w", c.base, err)
	}
	if resp.StatusCode/100 == 2 {
		return resp, nil
	}
	defer resp.Body.Close()
	data, _ := io.ReadAll(io.LimitReader(resp.Body, 16<<20))
	return nil, problemError(resp.StatusCode, data)
}

// getJSON fetches path into v.
func (c *client) getJSON(ctx context.Context, path string, v any) error {
	return c.getJSONQuery(ctx, path, nil, v)
}

// getJSONQuery fetches path with query q into v.
func (c *client) getJSONQuery(ctx context.Context, path string, q url.Values, v any) error {
	resp, err := c.do(ctx, http.MethodGet, path, q, nil, nil)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	return json.NewDecoder(resp.Body).Decode(v)
}

// postJSON posts in and decodes the answer into out.
func (c *client) postJSON(ctx context.Context, path string, in, out any) error {
	b, err := json.Marshal(in)
	if err != nil {
		return err
	}
	resp, err := c.do(ctx, http.MethodPost, path, nil, strings.NewReader(string(b)), nil)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	if out == nil {
		return nil
	}
	return json.NewDecoder(resp.Body).Decode(out)
}

// ref is a parsed P/D[@SELECTOR] argument; an empty Selector means latest.
type ref struct {
	Project, Dataset string
	Selector         string // as written after '@': N, latest, a snapshot prefix or an RFC 3339 instant
}

func (r ref) String() string {
	s := r.Project + "/" + r.Dataset
	if r.Selector != "" {
		s += "@" + r.Selector
	}
	return s
}

func (r ref) path() string {
	return "/projects/" + url.PathEscape(r.Project) + "/datasets/" + url.PathEscape(r.Dataset)
}

func (r ref) versionPath() string {
	v := r.Selector
	if v == "" {
		v = "latest"
	}
	return r.path() + "/versions/" + url.PathEscape(v)
}

// at returns r pinned to version number n.
func (r ref) at(n int) ref {
	r.Selector = strconv.Itoa(n)
	return r
}

// parseRef parses P/D, and P/D@SELECTOR when withVersion: a version
// number, latest, a snapshot id prefix or an RFC 3339 instant.
func parseRef(s string, withVersion bool) (ref, error) {
	var r ref
	body, _, hasVer := strings.Cut(s, "@")
	if hasVer && !withVersion {
		return r, usageErr("%q: no @VERSION here", s)
	}
	p, d, sel, err := catalog.SplitRef(s)
	if err != nil {
		want := "PROJECT/DATASET"
		if withVersion {
			want += "[@VERSION], where VERSION is a number, latest, a snapshot id prefix or an RFC 3339 instant"
		}
		if strings.Contains(body, "/") && hasVer {
			return r, usageErr("%q: %v", s, strings.TrimSuffix(err.Error(), ": "+catalog.ErrInvalid.Error()))
		}
		return r, usageErr("%q: want %s", s, want)
	}
	r.Project, r.Dataset = p, d
	if hasVer {
		r.Selector = sel.String()
	}
	return r, nil
}

// connect parses arg as a dataset reference (with an optional @VERSION
// when withVersion) and makes the client of the server: the first steps
// of a command that reads one dataset.
func (e *env) connect(arg string, withVersion bool) (ref, *client, error) {
	r, err := parseRef(arg, withVersion)
	if err != nil {
		return r, nil, err
	}
	cl, err := e.client()
	return r, cl, err
}

// fetch parses arg as a dataset reference (with an optional @VERSION when
// withVersion), fetches the path that sub builds from it into v, and
// reports whether the caller should print v as JSON and stop.
func (e *env) fetch(cmd interface{ Context() context.Context }, arg string, withVersion bool, sub func(ref) string, v any) (printed bool, err error) {
	r, cl, err := e.connect(arg, withVersion)
	if err != nil {
		return false, err
	}
	if err := cl.getJSON(cmd.Context(), sub(r), v); err != nil {
		return false, err
	}
	if e.json {
		return true, writeJSON(e.stdout, v)
	}
	return false, nil
}

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// stamp formats an instant for tables: RFC 3339 in UTC.
func stamp(t time.Time) string { return t.UTC().Format(time.RFC3339) }

// score formats a quality score, "-" when there is none.
func score(s *float64) string {
	if s == nil {
		return "-"
	}
	return fmt.Sprintf("%.1f", *s)
}
