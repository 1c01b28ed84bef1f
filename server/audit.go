package server

import (
	"errors"
	"fmt"
	"net/http"
	"slices"
	"strconv"
	"strings"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// auditParams are the query parameters of the audit trail's endpoints.
var auditParams = []string{"from", "to", "subject", "action", "project", "dataset", "outcome"}

// auditFilter reads an audit query and scopes it to what the token may
// see: admins everything, curators their own project (implied when no
// project is given); anyone else is refused.
func auditFilter(c echo.Context, paged bool) (catalog.AuditFilter, error) {
	cl := claims(c)
	q := c.QueryParams()
	var f catalog.AuditFilter
	var err error
	if f.From, f.To, err = window(q); err != nil {
		return f, err
	}
	f.Subject, f.Action, f.Project, f.Dataset, f.Outcome = q.Get("subject"), q.Get("action"), q.Get("project"), q.Get("dataset"), q.Get("outcome")
	switch cl.Role {
	case RoleAdmin:
	case RoleCurator:
		if f.Project == "" {
			f.Project = cl.Project
		}
		if f.Project != cl.Project {
			return f, forbidden("read the audit trail of project " + truncateParam(f.Project) + " (a curator reads its own project's)")
		}
	default:
		return f, forbidden("read the audit trail (admins, and curators for their project)")
	}
	if f.Outcome != "" && f.Outcome != catalog.OutcomeOK && f.Outcome != catalog.OutcomeDenied {
		return f, fail(http.StatusBadRequest, "invalid", "outcome %q: want ok or denied", truncateParam(f.Outcome))
	}
	if paged {
		if v := q.Get("limit"); v != "" {
			n, err := strconv.Atoi(v)
			if err != nil || n < 1 || n > catalog.MaxAuditPage {
				return f, fail(http.StatusBadRequest, "invalid", "limit %q: want a whole number from 1 to %d", truncateParam(v), catalog.MaxAuditPage)
			}
			f.Limit = n
		}
		f.After = q.Get("after")
	} else {
		f.Limit = catalog.MaxAuditPage
	}
	if err := f.Validate(); err != nil {
		return f, catalogError(err)
	}
	return f, nil
}

// listAudit serves a page of the audit trail, oldest first.
func (s *Server) listAudit(c echo.Context) error {
	f, err := auditFilter(c, true)
	if err != nil {
		return err
	}
	es, next, err := s.cfg.Store.AuditPage(c.Request().Context(), f)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, api.AuditPage{Entries: es, NextAfter: next})
}

// exportAudit streams every entry the filter selects as JSON Lines, and
// audits the export itself.
func (s *Server) exportAudit(c echo.Context) error {
	f, err := auditFilter(c, false)
	if err != nil {
		return err
	}
	ctx := c.Request().Context()
	if err := s.cfg.Store.RecordAudit(ctx, catalog.AuditEntry{Action: "audit.export", Project: f.Project, Dataset: f.Dataset,
		Target: "audit trail", Detail: c.Request().URL.RawQuery}); err != nil {
		return err
	}
	h := c.Response().Header()
	// JSON Lines has no registered media type; application/x-ndjson is
	// common practice.
	h.Set(echo.HeaderContentType, "application/x-ndjson")
	h.Set(echo.HeaderContentDisposition, `attachment; filename="flowcat-audit.jsonl"`)
	c.Response().WriteHeader(http.StatusOK)
	if _, err := s.cfg.Store.WriteAuditJSONL(ctx, c.Response(), f); err != nil {
		s.cfg.Logger.Error("audit export interrupted", "err", err)
		panic(http.ErrAbortHandler)
	}
	return nil
}

// auditRead records a read of version v's data (a download, an export, a
// bundle): who, which version, how.
func (s *Server) auditRead(c echo.Context, action string, v *catalog.Version, detail string) error {
	return s.cfg.Store.RecordAudit(c.Request().Context(), catalog.AuditEntry{
		Action: action, Project: v.Dataset.Project, Dataset: v.Dataset.Name,
		Target: fmt.Sprintf("%s@%d", v.Dataset, v.Number), Detail: detail,
	})
}

// auditDenied records each request a token was refused (403): what it
// tried, on which project and dataset. The path names projects, datasets,
// versions and token ids only; the query is not kept.
func (s *Server) auditDenied(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		err := next(c)
		var he *httpError
		if err == nil || !errors.As(err, &he) || he.body.Status != http.StatusForbidden {
			return err
		}
		project, dataset := c.Param("project"), c.Param("dataset")
		if dataset != "" && project == "" {
			dataset = ""
		}
		action := "denied." + routeAction(c)
		if aerr := s.cfg.Store.RecordAudit(c.Request().Context(), catalog.AuditEntry{
			Action: action, Outcome: catalog.OutcomeDenied, Project: project, Dataset: dataset,
			Target: c.Request().Method + " " + c.Request().URL.Path, Detail: he.body.Message,
		}); aerr != nil {
			s.cfg.Logger.Error("audit of a refused request failed", "err", aerr)
		}
		return err
	}
}

// routeAction names a route for the audit trail: its method and the
// fixed segments of its path, e.g. "post.uploads", "get.audit".
func routeAction(c echo.Context) string {
	var parts []string
	for _, seg := range strings.Split(strings.TrimPrefix(c.Path(), "/api/v1/"), "/") {
		if seg == "" || strings.HasPrefix(seg, ":") || seg == "projects" && len(parts) == 0 {
			continue
		}
		parts = append(parts, seg)
	}
	if len(parts) == 0 {
		parts = []string{"projects"}
	}
	return strings.ToLower(c.Request().Method) + "." + strings.Join(parts, ".")
}

// filterText names an export's filters for its audit entry: the names of
// the parameters given, not their values (a site or queue name is not an
// identifier, but the entry need not repeat the query).
func filterText(q map[string][]string) string {
	var names []string
	for k := range q {
		if k != "format" {
			names = append(names, k)
		}
	}
	if len(names) == 0 {
		return ""
	}
	slices.Sort(names)
	return "; filtered by " + strings.Join(names, ", ")
}
