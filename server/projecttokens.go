package server

import (
	"errors"
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// A project's curators manage the member and partner tokens of their
// project (catalog.TokenRecord.ManagedBy): list, issue and revoke them.
// Admin and curator tokens, and tokens of other projects, stay with the
// admins (/api/v1/admin/tokens).

func (s *Server) curatedProject(c echo.Context, what string) (string, error) {
	project := c.Param("project")
	if !claims(c).CanCurate(project) {
		return "", forbidden(what + " of project " + project + " (its curators and admins)")
	}
	if _, err := s.cfg.Store.Project(c.Request().Context(), project); err != nil {
		return "", catalogError(err)
	}
	return project, nil
}

func (s *Server) listProjectTokens(c echo.Context) error {
	project, err := s.curatedProject(c, "list the tokens")
	if err != nil {
		return err
	}
	if _, err := s.cfg.Store.ImportTokenSpool(c.Request().Context(), s.cfg.TokenSpool); err != nil {
		return err
	}
	recs, err := s.cfg.Store.ProjectTokens(c.Request().Context(), project)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, api.Tokens{Tokens: recs})
}

func (s *Server) issueProjectToken(c echo.Context) error {
	project, err := s.curatedProject(c, "issue tokens")
	if err != nil {
		return err
	}
	var req api.IssueProjectToken
	if err := decodeJSON(c, &req, `{"role": "member" | "partner", "subject", "datasets", "sites", "replace", "ttl"}`); err != nil {
		return err
	}
	ctx := c.Request().Context()
	g := Grant{Role: req.Role, Subject: req.Subject, Sites: req.Sites, Replace: req.Replace}
	switch req.Role {
	case RoleMember:
		if len(req.Datasets) > 0 {
			return fail(http.StatusBadRequest, "invalid", "datasets: a member token reads its whole project; name datasets for a partner token only")
		}
		g.Project = project
	case RolePartner:
		if len(req.Datasets) == 0 {
			return fail(http.StatusBadRequest, "invalid", "datasets: a partner token needs at least one dataset of project %s", project)
		}
		for _, d := range req.Datasets {
			p, name, ok := strings.Cut(d, "/")
			if !ok {
				p, name = project, d
			}
			if p != project {
				return forbidden("issue a token for dataset " + truncateParam(d) + ": a curator of " + project + " issues tokens for its own project's datasets")
			}
			if _, err := s.cfg.Store.Dataset(ctx, p, name); err != nil {
				return catalogError(err)
			}
			g.Datasets = append(g.Datasets, p+"/"+name)
		}
	case RoleAdmin, RoleCurator:
		return forbidden("issue " + req.Role + " tokens (admins issue admin and curator tokens)")
	default:
		return fail(http.StatusBadRequest, "invalid", "role %q: want member or partner", truncateParam(req.Role))
	}
	ttl, err := time.ParseDuration(req.TTL)
	if err != nil {
		return fail(http.StatusBadRequest, "invalid", "ttl %q: want a duration such as 720h", truncateParam(req.TTL))
	}
	g.TTL = ttl
	tok, err := s.cfg.Authority.IssueRecorded(ctx, s.cfg.Store, claims(c).Subject, g)
	if err != nil {
		if errors.Is(err, catalog.ErrInvalid) || errors.Is(err, catalog.ErrExists) {
			return catalogError(err)
		}
		return fail(http.StatusBadRequest, "invalid", "%s", err.Error())
	}
	return c.JSON(http.StatusCreated, api.Token{Token: tok})
}

func (s *Server) revokeProjectToken(c echo.Context) error {
	project, err := s.curatedProject(c, "revoke tokens")
	if err != nil {
		return err
	}
	var req api.Reason
	if err := decodeJSON(c, &req, `{"reason": ...}`); err != nil {
		return err
	}
	rv, err := s.cfg.Store.RevokeProjectToken(c.Request().Context(), claims(c).Subject, project, c.Param("jti"), req.Reason)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, rv)
}
