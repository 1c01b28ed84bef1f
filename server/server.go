// Package server is flowcat's HTTP API: routing, token checks, request
// parsing and streaming responses, under /api/v1. Every handler calls the
// catalog; the server holds no state of its own.
package server

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"strings"
	"sync"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/labstack/echo/v4/middleware"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// Config configures a server.
type Config struct {
	Store     *catalog.Store
	Authority *Authority
	Logger    *slog.Logger // default slog.Default()
	// MaxUploadBytes bounds the body of one upload as it comes over the
	// wire: the bytes of the request body, compressed if the file is
	// gzip, after any HTTP transfer coding (default 8 GiB; 413 above).
	MaxUploadBytes int64
	// MaxUploadsPerToken bounds the uploads one token (its jti) has in
	// progress at once (default 4; 429 above).
	MaxUploadsPerToken int
	// BodyIdleTimeout is how long the server waits for the next byte of a
	// request body before it gives up (default 60 s; 408).
	BodyIdleTimeout time.Duration
	// RateLimit bounds the requests one token (its jti) sends a second,
	// with bursts of RateBurst (defaults DefaultRateLimit and
	// DefaultRateBurst; a negative RateLimit turns the limit off); 429
	// with Retry-After above.
	RateLimit float64
	RateBurst int
	// TokenSpool is the folder where the command line leaves the records
	// of tokens it issued while this server held the catalog (see
	// catalog.SpoolToken); "" for none. A token signed by an EdDSA key is
	// honoured only when the catalog has its record, imported from here
	// if need be.
	TokenSpool string
	// CitationAuthor is the author CITATION.cff files name (the lab that
	// curates the data); default the project's title, or its name.
	CitationAuthor string
}

// Defaults of Config.
const (
	DefaultMaxUploadsPerToken = 4
	DefaultBodyIdleTimeout    = 60 * time.Second
)

// Server serves the API.
type Server struct {
	cfg    Config
	echo   *echo.Echo
	routes []route
	// metrics are served at /metrics (metrics.go).
	metrics *promMetrics

	mu        sync.Mutex
	uploading map[string]int // uploads in progress per token id
	limits    *tokenLimits   // nil: no rate limit

	csrfKey []byte // signs the pages' form tokens (pages.go)
	openapi []byte // the OpenAPI document (contract.go)

	summaries summaryCache // stored summaries last served (serving.go)
}

// New returns a server for cfg.
func New(cfg Config) *Server {
	if cfg.Logger == nil {
		cfg.Logger = slog.Default()
	}
	if cfg.MaxUploadBytes <= 0 {
		cfg.MaxUploadBytes = 8 << 30
	}
	if cfg.MaxUploadsPerToken <= 0 {
		cfg.MaxUploadsPerToken = DefaultMaxUploadsPerToken
	}
	if cfg.BodyIdleTimeout <= 0 {
		cfg.BodyIdleTimeout = DefaultBodyIdleTimeout
	}
	e := echo.New()
	e.HideBanner = true
	e.HidePort = true
	e.HTTPErrorHandler = errorHandler(cfg.Logger)
	if cfg.RateLimit == 0 {
		cfg.RateLimit = DefaultRateLimit
	}
	if cfg.RateBurst <= 0 {
		cfg.RateBurst = DefaultRateBurst
	}
	s := &Server{cfg: cfg, echo: e, uploading: map[string]int{}, csrfKey: newCSRFKey(), metrics: newMetrics()}
	if cfg.RateLimit > 0 {
		s.limits = newTokenLimits(cfg.RateLimit, cfg.RateBurst)
	}
	e.Use(middleware.Recover())
	e.Use(securityHeaders)
	e.Use(middleware.RequestID())
	e.Use(s.accessLog)
	e.Use(s.metrics.instrument)

	e.Pre(wellFormedQuery)
	const api, ds = "/api/v1", "/api/v1/projects/:project/datasets/:dataset"
	filter := []string{"from", "to", "site*", "queue*", "activity*"}
	s.routes = []route{
		{method: "GET", path: api + "/health", h: s.health, public: true},
		{method: "GET", path: "/healthz", h: s.healthz, public: true},
		{method: "GET", path: "/readyz", h: s.readyz, public: true},
		{method: "GET", path: "/metrics", h: s.serveMetrics, public: true},
		{method: "GET", path: api + "/schema", h: s.schema, public: true},
		{method: "GET", path: OpenAPIPath, h: s.getOpenAPI, public: true},
		{method: "GET", path: api + "/projects", h: s.listProjects, params: []string{"archived"}},
		{method: "POST", path: api + "/projects", h: s.createProject},
		{method: "GET", path: api + "/projects/:project", h: s.getProject},
		{method: "PATCH", path: api + "/projects/:project", h: s.editProject},
		{method: "POST", path: api + "/projects/:project/archive", h: s.projectMark},
		{method: "POST", path: api + "/projects/:project/unarchive", h: s.projectMark},
		{method: "POST", path: api + "/projects/:project/delete", h: s.projectMark},
		{method: "GET", path: api + "/projects/:project/datasets", h: s.listDatasets, params: []string{"archived"}},
		{method: "POST", path: api + "/projects/:project/datasets", h: s.createDataset},
		{method: "GET", path: ds, h: s.getDataset},
		{method: "POST", path: ds + "/changes", h: s.setChanges},
		{method: "PATCH", path: ds, h: s.editDataset},
		{method: "GET", path: ds + "/profiles", h: s.listProfiles},
		{method: "POST", path: ds + "/archive", h: s.archiveDataset},
		{method: "POST", path: ds + "/unarchive", h: s.unarchiveDataset},
		{method: "POST", path: ds + "/delete", h: s.deleteDataset},
		{method: "GET", path: ds + "/metadata", h: s.getMetadata},
		{method: "POST", path: ds + "/metadata", h: s.setMetadata},
		{method: "POST", path: ds + "/uploads", h: s.upload, params: []string{"filename", "mode", "from", "to", "site*"}},
		{method: "GET", path: ds + "/uploads", h: s.listUploads},
		{method: "GET", path: ds + "/versions", h: s.listVersions, params: []string{"limit", "after"}},
		{method: "GET", path: ds + "/versions/:version", h: s.getVersion},
		{method: "GET", path: ds + "/versions/:version/manifest", h: s.getManifest},
		{method: "GET", path: ds + "/versions/:version/quality", h: s.getQuality},
		{method: "GET", path: ds + "/versions/:version/files/:file", h: s.download},
		{method: "HEAD", path: ds + "/versions/:version/files/:file", h: s.download},
		{method: "GET", path: ds + "/versions/:version/summary", h: s.getSummary, params: filter},
		{method: "GET", path: ds + "/versions/:version/export", h: s.exportVersion, params: append([]string{"format", "type*", "columns*"}, filter...)},
		{method: "GET", path: ds + "/versions/:version/bundle", h: s.getBundle, params: []string{"format"}},
		{method: "GET", path: ds + "/versions/:version/citation", h: s.getCitation},
		{method: "GET", path: ds + "/diff", h: s.diffVersions, params: append([]string{"a", "b", "type*"}, filter...)},
		{method: "GET", path: ds + "/quality/trend", h: s.getTrend, params: []string{"site"}},
		{method: "GET", path: ds + "/alerts", h: s.getAlerts, params: []string{"site"}},
		{method: "POST", path: ds + "/versions/:version/publish", h: s.setState},
		{method: "POST", path: ds + "/versions/:version/retract", h: s.setState},
		{method: "GET", path: ds + "/versions/:version/disclosure", h: s.getDisclosure},
		{method: "POST", path: ds + "/versions/:version/publish-override", h: s.publishOverride},
		{method: "GET", path: api + "/projects/:project/disclosure", h: s.getDisclosurePolicy},
		{method: "PUT", path: api + "/projects/:project/disclosure", h: s.setDisclosurePolicy},
		{method: "POST", path: api + "/admin/gc", h: s.collectGarbage},
		{method: "GET", path: "/.well-known/jwks.json", h: s.jwks, public: true},
		{method: "GET", path: api + "/admin/tokens", h: s.listTokens},
		{method: "POST", path: api + "/admin/tokens", h: s.issueToken},
		{method: "POST", path: api + "/admin/tokens/:jti/revoke", h: s.revokeToken},
		{method: "GET", path: api + "/projects/:project/tokens", h: s.listProjectTokens},
		{method: "POST", path: api + "/projects/:project/tokens", h: s.issueProjectToken},
		{method: "POST", path: api + "/projects/:project/tokens/:jti/revoke", h: s.revokeProjectToken},
		{method: "GET", path: api + "/audit", h: s.listAudit, params: append([]string{"limit", "after"}, auditParams...)},
		{method: "GET", path: api + "/audit/export", h: s.exportAudit, params: auditParams},
	}
	s.routes = append(s.routes, s.pageRoutes()...)
	s.buildOpenAPI()
	for _, r := range s.routes {
		var mw []echo.MiddlewareFunc
		if r.page {
			// Pages: errors as HTML, the token from the session cookie,
			// and a form token on every POST.
			mw = append(mw, s.pageErrors, s.pageSession(r.public))
			if !r.public {
				mw = append(mw, s.rateLimit, s.auditDenied)
			}
		} else if !r.public {
			mw = append(mw, s.authenticate, s.rateLimit, s.auditDenied)
		}
		mw = append(mw, knownParams(r.params))
		if r.method == http.MethodPost || r.method == http.MethodPatch {
			mw = append(mw, s.idleBodies)
		}
		if r.page && r.method == http.MethodPost {
			mw = append(mw, s.checkCSRF)
		}
		e.Add(r.method, r.path, r.h, mw...)
	}
	e.RouteNotFound("/*", s.notFound)
	return s
}

// ServeHTTP implements http.Handler.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) { s.echo.ServeHTTP(w, r) }

// HTTPServer returns an http.Server for addr with sensible timeouts: no
// overall read timeout, so that long uploads stream, but a bound on headers
// and idle connections.
func (s *Server) HTTPServer(addr string) *http.Server {
	return &http.Server{
		Addr:              addr,
		Handler:           s,
		ReadHeaderTimeout: 10 * time.Second,
		IdleTimeout:       2 * time.Minute,
		ConnContext: func(ctx context.Context, c net.Conn) context.Context {
			return context.WithValue(ctx, connKey{}, c)
		},
	}
}

func (s *Server) accessLog(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		start := time.Now()
		err := next(c)
		if err != nil {
			c.Error(err)
		}
		req := c.Request()
		sub := ""
		if cl, ok := c.Get(claimsKey).(*Claims); ok {
			sub = cl.Subject
		}
		// The path names projects, datasets and versions only; query
		// strings are not logged.
		// The record is handed to the handler directly: Logger.LogAttrs
		// would also walk the stack for the caller's position, which an
		// access log line does not print (about 1.5% of a small answer's
		// CPU).
		ctx, h := req.Context(), s.cfg.Logger.Handler()
		if !h.Enabled(ctx, slog.LevelInfo) {
			return nil
		}
		rec := slog.NewRecord(time.Now(), slog.LevelInfo, "request", 0)
		rec.AddAttrs(slog.String("method", req.Method), slog.String("path", req.URL.Path),
			slog.Int("status", c.Response().Status), slog.Int64("bytes", c.Response().Size),
			slog.Int64("ms", time.Since(start).Milliseconds()), slog.String("sub", sub),
			slog.String("id", c.Response().Header().Get(echo.HeaderXRequestID)))
		h.Handle(ctx, rec) //nolint:errcheck // as Logger.LogAttrs: a log line that cannot be written is dropped
		return nil
	}
}

// httpError is an error with a status and code, answered as problem
// details (api.Problem).
type httpError struct {
	body api.ErrorBody
	err  error
}

func (e *httpError) Error() string { return e.body.Message }
func (e *httpError) Unwrap() error { return e.err }

func fail(status int, code, format string, args ...any) *httpError {
	return &httpError{body: api.ErrorBody{Status: status, Code: code, Message: fmt.Sprintf(format, args...)}}
}

// errorStatuses is the one table from the catalog's errors to HTTP
// statuses and codes: the first sentinel an error wraps gives them. The
// upload's own come first (an upload's failure may wrap another).
var errorStatuses = [...]struct {
	sentinel error
	status   int
	code     string
}{
	{catalog.ErrUploadTooLarge, http.StatusRequestEntityTooLarge, "too_large"},
	{catalog.ErrBodyTimeout, http.StatusRequestTimeout, "body_timeout"},
	{catalog.ErrNoSpace, http.StatusInsufficientStorage, "insufficient_storage"}, // RFC 4918 section 11.5
	{catalog.ErrClientGone, statusClientGone, "client_gone"},                     // nobody reads it: for the access log
	{catalog.ErrFileInvalid, http.StatusBadRequest, "file_invalid"},
	{catalog.ErrRejected, http.StatusUnprocessableEntity, "rejected"},
	// The data of a retracted version is gone; its metadata stays.
	{catalog.ErrRetracted, http.StatusGone, "retracted"},
	{catalog.ErrNotFound, http.StatusNotFound, "not_found"},
	{catalog.ErrExists, http.StatusConflict, "exists"},
	{catalog.ErrState, http.StatusConflict, "state"},
	{catalog.ErrRiskAboveThreshold, http.StatusConflict, "disclosure_risk"},
	{catalog.ErrInvalid, http.StatusBadRequest, "invalid"},
}

// catalogError maps err by errorStatuses to an *httpError with err's text;
// an error of none of them is the server's fault, returned as it is.
func catalogError(err error) error {
	for _, m := range errorStatuses {
		if errors.Is(err, m.sentinel) {
			return &httpError{body: api.ErrorBody{Status: m.status, Code: m.code, Message: err.Error()}, err: err}
		}
	}
	return err
}

func errorHandler(log *slog.Logger) echo.HTTPErrorHandler {
	return func(err error, c echo.Context) {
		if c.Response().Committed {
			return
		}
		var body api.ErrorBody
		var he *httpError
		var ee *echo.HTTPError
		switch {
		case errors.As(err, &he):
			body = he.body
		case errors.As(err, &ee):
			body = api.ErrorBody{Status: ee.Code, Code: strings.ReplaceAll(strings.ToLower(http.StatusText(ee.Code)), " ", "_"), Message: fmt.Sprint(ee.Message)}
		default:
			log.Error("internal error", "path", c.Request().URL.Path, "err", err)
			body = api.ErrorBody{Status: http.StatusInternalServerError, Code: "internal", Message: "internal error; the server log has the details"}
		}
		if body.Status == http.StatusUnauthorized && c.Response().Header().Get("WWW-Authenticate") == "" {
			c.Response().Header().Set("WWW-Authenticate", `Bearer realm="flowcat"`)
		}
		if c.Request().Method == http.MethodHead {
			c.NoContent(body.Status)
			return
		}
		b, _ := json.Marshal(api.NewProblem(body))
		c.Blob(body.Status, api.ProblemMedia, append(b, '\n'))
	}
}

const claimsKey = "flowcat.claims"

func (s *Server) authenticate(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		h := c.Request().Header.Get(echo.HeaderAuthorization)
		scheme, tok, ok := strings.Cut(h, " ")
		if h == "" {
			return fail(http.StatusUnauthorized, "unauthorized", "no token: send Authorization: Bearer <token>")
		}
		if !ok || !strings.EqualFold(scheme, "Bearer") || tok == "" {
			return fail(http.StatusUnauthorized, "unauthorized", "Authorization must be Bearer <token>")
		}
		cl, err := s.checkToken(c.Request().Context(), tok)
		if err != nil {
			var he *httpError
			if errors.As(err, &he) && he.body.Status == http.StatusUnauthorized {
				// RFC 6750 section 3.1: a token was sent and is not valid.
				c.Response().Header().Set("WWW-Authenticate", `Bearer realm="flowcat", error="invalid_token"`)
			}
			return err
		}
		setClaims(c, cl)
		return next(c)
	}
}

// checkToken verifies a token, checks that the catalog has its record and
// checks the revocations bucket, so that a revoked jti stops
// authenticating at once; an invalid, unrecorded or revoked token is a
// 401.
func (s *Server) checkToken(ctx context.Context, tok string) (*Claims, error) {
	cl, err := s.cfg.Authority.Verify(strings.TrimSpace(tok))
	if err != nil {
		return nil, fail(http.StatusUnauthorized, "unauthorized", "%s", err.Error())
	}
	// A token signed by an EdDSA key is honoured only when the catalog
	// has its record (issued through the catalog, or spooled by the
	// command line while this server ran): a token nobody can list
	// cannot be revoked by jti. HS256 tokens predate records and are
	// exempt until the legacy key is retired.
	recorded, revoked, err := s.cfg.Store.TokenStanding(cl.ID)
	if err != nil {
		return nil, err
	}
	if cl.kid != "" && !recorded {
		ok, err := s.cfg.Store.ImportSpooledToken(ctx, s.cfg.TokenSpool, cl.ID)
		if err != nil {
			return nil, err
		}
		if !ok {
			return nil, fail(http.StatusUnauthorized, "unauthorized", "unauthorized: token %s is not recorded in this catalog; issue tokens with flowcat token issue or POST /api/v1/admin/tokens", cl.ID)
		}
		if _, revoked, err = s.cfg.Store.TokenStanding(cl.ID); err != nil { // as imported
			return nil, err
		}
	}
	if revoked {
		return nil, fail(http.StatusUnauthorized, "unauthorized", "unauthorized: token %s was revoked", cl.ID)
	}
	return cl, nil
}

// setClaims makes cl the request's claims and its actor, for the audit
// trail.
func setClaims(c echo.Context, cl *Claims) {
	c.Set(claimsKey, cl)
	req := c.Request()
	from, _, err := net.SplitHostPort(req.RemoteAddr)
	if err != nil {
		from = req.RemoteAddr
	}
	c.SetRequest(req.WithContext(catalog.WithActor(req.Context(), catalog.Actor{Subject: cl.Subject, TokenID: cl.ID, Role: cl.Role, From: from})))
}

func claims(c echo.Context) *Claims { return c.Get(claimsKey).(*Claims) }

func forbidden(what string) error {
	return fail(http.StatusForbidden, "forbidden", "this token may not %s", what)
}

func (s *Server) health(c echo.Context) error {
	return c.JSON(http.StatusOK, api.Health{Status: "ok", SchemaVersion: schema.Version})
}

func (s *Server) schema(c echo.Context) error {
	return c.Blob(http.StatusOK, "application/schema+json", schema.JSONSchema())
}
