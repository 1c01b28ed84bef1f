package server

import (
	"bytes"
	"crypto/hmac"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/server/api"
	"github.com/flowcat-catalog/flowcat/web"
)

// The pages for people live beside the API and call the same catalog
// functions. A reader signs in once by pasting a token; the server keeps
// it in a cookie (HttpOnly: scripts cannot read it; SameSite=Strict: no
// other site's page can make the browser send it; Secure when the
// connection is TLS, its own or a proxy's; RFC 6265bis section 4.1) and never puts it in a URL.
// Every form carries a token signed by the server over the browser's
// form cookie (the signed double-submit pattern of the OWASP CSRF
// Prevention Cheat Sheet), and a POST whose Origin or Sec-Fetch-Site says
// it came from another site is refused.

// Cookie names.
const (
	sessionCookie = "flowcat_session"
	formCookie    = "flowcat_form"
)

// maxFormBytes bounds the body of a page's form.
const maxFormBytes = 64 << 10

const (
	formTokenKey   = "flowcat.form"
	signInProblem  = "flowcat.signin"
	pageDatasetKey = "flowcat.page.dataset"
)

func newCSRFKey() []byte {
	k := make([]byte, 32)
	if _, err := rand.Read(k); err != nil {
		panic(err) // crypto/rand does not fail on supported platforms
	}
	return k
}

// pageRoutes are the pages, their forms and the downloads they link to.
func (s *Server) pageRoutes() []route {
	const v = "/view/:project/:dataset/:version"
	return []route{
		{method: "GET", path: "/", h: s.home, public: true, page: true},
		{method: "GET", path: "/static/:name", h: s.asset, public: true},
		{method: "GET", path: "/signin", h: s.signInForm, public: true, page: true, params: []string{"next"}},
		{method: "POST", path: "/signin", h: s.signIn, public: true, page: true},
		{method: "POST", path: "/signout", h: s.signOut, public: true, page: true},
		{method: "GET", path: "/catalog", h: s.catalogPage, page: true, params: []string{"q", "site", "from", "to", "project"}},
		{method: "GET", path: "/view/:project", h: s.projectPage, page: true},
		{method: "GET", path: "/view/:project/:dataset", h: s.datasetPage, page: true, params: []string{"after"}},
		{method: "GET", path: v, h: s.versionPage, page: true, params: []string{"diff"}},
		{method: "POST", path: v + "/publish", h: s.curatePage, page: true},
		{method: "POST", path: v + "/withdraw", h: s.curatePage, page: true},
		{method: "GET", path: v + "/bundle", h: s.getBundle, page: true, params: []string{"format"}},
		{method: "GET", path: v + "/export", h: s.exportPage, page: true, params: []string{"format", "from", "to", "site*", "queue*", "columns*", "type*"}},
		{method: "GET", path: v + "/citation", h: s.getCitation, page: true},
		{method: "GET", path: v + "/files/:file", h: s.download, page: true},
	}
}

// asset serves a file of web.Static.
func (s *Server) asset(c echo.Context) error {
	b, err := fsReadFile(c.Param("name"))
	if err != nil {
		return fail(http.StatusNotFound, "not_found", "no such asset: %s", truncateParam(c.Param("name")))
	}
	c.Response().Header().Set("Cache-Control", "public, max-age=3600")
	ct := "application/octet-stream"
	if strings.HasSuffix(c.Param("name"), ".css") {
		ct = "text/css; charset=utf-8"
	}
	return c.Blob(http.StatusOK, ct, b)
}

// pageSession reads the session cookie: a valid token's claims serve the
// request as an Authorization header would. Without one, a page that
// needs a token answers 401 with the sign-in page. It also makes sure the
// browser has a form cookie, so that the page's forms can carry a token.
func (s *Server) pageSession(public bool) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			h := c.Response().Header()
			// The pages load nothing from elsewhere and run no script.
			h.Set("Content-Security-Policy", "default-src 'none'; style-src 'self'; img-src 'self'; form-action 'self'; frame-ancestors 'none'; base-uri 'none'")
			h.Set("Referrer-Policy", "no-referrer")
			h.Set("X-Content-Type-Options", "nosniff")
			h.Set("Cache-Control", "no-store")
			s.formToken(c)
			if ck, err := c.Cookie(sessionCookie); err == nil && ck.Value != "" {
				cl, err := s.checkToken(c.Request().Context(), ck.Value)
				switch {
				case err == nil:
					setClaims(c, cl)
				case isStatus(err, http.StatusUnauthorized):
					s.clearSession(c)
					c.Set(signInProblem, "Your token no longer works ("+strings.TrimPrefix(err.Error(), "unauthorized: ")+"). Sign in with a new one.")
				default:
					return err
				}
			}
			if !public && c.Get(claimsKey) == nil {
				return s.renderSignIn(c, http.StatusUnauthorized, c.Request().URL.RequestURI())
			}
			return next(c)
		}
	}
}

// secure reports whether the browser reached the server over TLS: the
// connection's own, or a proxy's that says so (X-Forwarded-Proto and its
// kin, as echo reads them). A cookie marked Secure is then never sent
// over plain HTTP.
func secure(c echo.Context) bool { return c.Scheme() == "https" }

func isStatus(err error, status int) bool {
	var he *httpError
	return errors.As(err, &he) && he.body.Status == status
}

// formToken returns the form token of this browser: the HMAC of its form
// cookie under the server's key. It sets a new form cookie when the
// browser has none.
func (s *Server) formToken(c echo.Context) string {
	if t, ok := c.Get(formTokenKey).(string); ok {
		return t
	}
	var seed string
	if ck, err := c.Cookie(formCookie); err == nil && len(ck.Value) >= 32 {
		seed = ck.Value
	} else {
		b := make([]byte, 32)
		rand.Read(b)
		seed = base64.RawURLEncoding.EncodeToString(b)
		c.SetCookie(&http.Cookie{Name: formCookie, Value: seed, Path: "/", HttpOnly: true, Secure: secure(c), SameSite: http.SameSiteStrictMode})
	}
	m := hmac.New(sha256.New, s.csrfKey)
	m.Write([]byte("flowcat form\x00" + seed))
	t := base64.RawURLEncoding.EncodeToString(m.Sum(nil))
	c.Set(formTokenKey, t)
	return t
}

// checkCSRF refuses a form POST from another site or without this
// browser's form token.
func (s *Server) checkCSRF(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		req := c.Request()
		if site := req.Header.Get("Sec-Fetch-Site"); site != "" && site != "same-origin" && site != "none" {
			return fail(http.StatusForbidden, "forbidden", "a form of another site (%s) may not act here", truncateParam(site))
		}
		// The host must be this one; either scheme is taken, so that a
		// proxy that ends TLS in front of the server passes.
		if o := req.Header.Get("Origin"); o != "" && o != "null" && o != "http://"+req.Host && o != "https://"+req.Host {
			return fail(http.StatusForbidden, "forbidden", "a form of %s may not act here", truncateParam(o))
		}
		req.Body = http.MaxBytesReader(c.Response().Writer, req.Body, maxFormBytes)
		if err := req.ParseForm(); err != nil {
			return fail(http.StatusBadRequest, "invalid", "form: %v", err)
		}
		got := req.PostForm.Get("csrf")
		_, noCookie := c.Cookie(formCookie)
		if noCookie != nil || got == "" || subtle.ConstantTimeCompare([]byte(got), []byte(s.formToken(c))) != 1 {
			return fail(http.StatusForbidden, "forbidden", "this form has expired or did not come from this site's page; go back, reload the page and send it again")
		}
		return next(c)
	}
}

// pageErrors renders a page's error as HTML; a 401 shows the sign-in page.
func (s *Server) pageErrors(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		err := next(c)
		if err == nil || c.Response().Committed {
			return err
		}
		var body api.ErrorBody
		var he *httpError
		var ee *echo.HTTPError
		switch {
		case errors.As(err, &he):
			body = he.body
		case errors.As(err, &ee):
			body = api.ErrorBody{Status: ee.Code, Message: fmt.Sprint(ee.Message)}
		default:
			s.cfg.Logger.Error("internal error", "path", c.Request().URL.Path, "err", err)
			body = api.ErrorBody{Status: http.StatusInternalServerError, Message: "something went wrong on the server; its log has the details"}
		}
		if body.Status == http.StatusUnauthorized {
			c.Set(signInProblem, body.Message)
			return s.renderSignIn(c, http.StatusUnauthorized, c.Request().URL.RequestURI())
		}
		heading := map[int]string{
			http.StatusBadRequest: "That request cannot be read", http.StatusForbidden: "Not for this token",
			http.StatusNotFound: "Not here", http.StatusConflict: "Not in this state", http.StatusGone: "Withdrawn",
		}[body.Status]
		if heading == "" {
			heading = http.StatusText(body.Status)
		}
		return s.render(c, body.Status, "error", heading, nil, web.ErrorPage{Status: body.Status, Heading: heading, Message: body.Message})
	}
}

// render writes a page.
func (s *Server) render(c echo.Context, status int, name, title string, crumbs []web.Crumb, content any) error {
	p := &web.Page{Title: title, CSRF: s.formToken(c), Crumbs: crumbs, Content: content}
	if cl, ok := c.Get(claimsKey).(*Claims); ok {
		p.Viewer = &web.Viewer{Subject: cl.Subject, Role: cl.Role, Project: cl.Project, Datasets: cl.Datasets}
		if cl.ExpiresAt != nil {
			p.Viewer.Expires = cl.ExpiresAt.Time
		}
	}
	var buf bytes.Buffer
	if err := web.Render(&buf, name, p); err != nil {
		return err
	}
	return c.HTMLBlob(status, buf.Bytes())
}

func (s *Server) renderSignIn(c echo.Context, status int, next string) error {
	problem, _ := c.Get(signInProblem).(string)
	if next == "/signin" || !localPath(next) {
		next = ""
	}
	return s.render(c, status, "signin", "Sign in", nil, web.SignIn{Next: next, Problem: problem})
}

// localPath reports whether p is a path of this server (not another
// host's, nor a scheme-relative //host), safe to redirect to.
func localPath(p string) bool {
	if !strings.HasPrefix(p, "/") || strings.HasPrefix(p, "//") || strings.HasPrefix(p, "/\\") {
		return false
	}
	u, err := url.Parse(p)
	return err == nil && u.Host == "" && u.Scheme == ""
}

// home sends a signed-in reader to the catalog and a visitor to the
// sign-in page, which says what to do without a token.
func (s *Server) home(c echo.Context) error {
	if c.Get(claimsKey) != nil {
		return c.Redirect(http.StatusSeeOther, "/catalog")
	}
	return s.renderSignIn(c, http.StatusOK, "")
}

func (s *Server) signInForm(c echo.Context) error {
	return s.renderSignIn(c, http.StatusOK, c.QueryParam("next"))
}

// signIn checks the pasted token and keeps it in the session cookie until
// it expires.
func (s *Server) signIn(c echo.Context) error {
	tok := strings.TrimSpace(c.Request().PostForm.Get("token"))
	next := c.Request().PostForm.Get("next")
	if tok == "" {
		c.Set(signInProblem, "Paste your token into the box first.")
		return s.renderSignIn(c, http.StatusBadRequest, next)
	}
	cl, err := s.checkToken(c.Request().Context(), tok)
	if err != nil {
		if !isStatus(err, http.StatusUnauthorized) {
			return err
		}
		c.Set(signInProblem, "That token was not accepted: "+strings.TrimPrefix(err.Error(), "unauthorized: ")+".")
		return s.renderSignIn(c, http.StatusUnauthorized, next)
	}
	ck := &http.Cookie{Name: sessionCookie, Value: tok, Path: "/", HttpOnly: true, Secure: secure(c), SameSite: http.SameSiteStrictMode}
	if cl.ExpiresAt != nil {
		ck.Expires = cl.ExpiresAt.Time
	}
	c.SetCookie(ck)
	if !localPath(next) {
		next = "/catalog"
	}
	return c.Redirect(http.StatusSeeOther, next)
}

func (s *Server) clearSession(c echo.Context) {
	c.SetCookie(&http.Cookie{Name: sessionCookie, Value: "", Path: "/", HttpOnly: true, Secure: secure(c), SameSite: http.SameSiteStrictMode, MaxAge: -1, Expires: time.Unix(0, 0)})
}

// signOut forgets the session cookie.
func (s *Server) signOut(c echo.Context) error {
	s.clearSession(c)
	c.Set(claimsKey, nil)
	c.Set(signInProblem, "You are signed out.")
	return s.renderSignIn(c, http.StatusOK, "")
}

// projectPage is the catalog narrowed to one project.
func (s *Server) projectPage(c echo.Context) error {
	return c.Redirect(http.StatusSeeOther, "/catalog?project="+url.QueryEscape(c.Param("project")))
}
