package server

import (
	"net/http"
	"strings"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

func curates(cl *Claims, project, _ string) bool { return cl.CanCurate(project) }

// editDataset edits a dataset (its curators): title, description,
// threshold, window, profile and zone; a profile change makes a new
// profile revision.
func (s *Server) editDataset(c echo.Context) error {
	d, err := s.dataset(c, curates, "edit dataset")
	if err != nil {
		return err
	}
	var req api.EditDataset
	if err := decodeJSON(c, &req, `{"title", "description", "reject_above", "window_from", "window_to", "clear_window", "profile", "timezone"}`); err != nil {
		return err
	}
	nd, err := s.cfg.Store.EditDataset(c.Request().Context(), d.Project, d.Name, catalog.DatasetEdit{
		Title: req.Title, Description: req.Description, RejectAbove: req.RejectAbove,
		WindowFrom: req.WindowFrom, WindowTo: req.WindowTo, ClearWindow: req.ClearWindow,
		Profile: req.Profile, Timezone: req.Timezone,
	}, claims(c).Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, nd)
}

// listProfiles lists a dataset's profile revisions (whoever sees the
// dataset: a partner maps its exports through them).
func (s *Server) listProfiles(c echo.Context) error {
	d, err := s.dataset(c, (*Claims).CanSeeDataset, "see dataset")
	if err != nil {
		return err
	}
	revs, err := s.cfg.Store.ProfileRevisions(c.Request().Context(), d.Project, d.Name)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, api.ProfileRevisions{Revisions: revs})
}

// optionalReason reads a body {"reason"} that may be absent.
func optionalReason(c echo.Context) (string, error) {
	req := c.Request()
	if req.ContentLength == 0 {
		return "", nil
	}
	var r api.Reason
	if err := decodeJSON(c, &r, `{"reason"}`); err != nil {
		return "", err
	}
	return r.Reason, nil
}

func (s *Server) archiveDataset(c echo.Context) error {
	d, err := s.dataset(c, curates, "archive dataset")
	if err != nil {
		return err
	}
	reason, err := optionalReason(c)
	if err != nil {
		return err
	}
	nd, err := s.cfg.Store.ArchiveDataset(c.Request().Context(), d.Project, d.Name, reason, claims(c).Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, nd)
}

func (s *Server) unarchiveDataset(c echo.Context) error {
	d, err := s.dataset(c, curates, "unarchive dataset")
	if err != nil {
		return err
	}
	nd, err := s.cfg.Store.UnarchiveDataset(c.Request().Context(), d.Project, d.Name, claims(c).Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, nd)
}

// deleteDataset deletes a dataset: its curators when no version was ever
// published, else an admin; a reason is required.
func (s *Server) deleteDataset(c echo.Context) error {
	d, err := s.dataset(c, curates, "delete dataset")
	if err != nil {
		return err
	}
	var req api.Reason
	if err := decodeJSON(c, &req, `{"reason"}`); err != nil {
		return err
	}
	cl := claims(c)
	del, err := s.cfg.Store.DeleteDataset(c.Request().Context(), d.Project, d.Name, req.Reason, cl.Subject, cl.Role == RoleAdmin)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, del)
}

// editProject sets a project's title (its curators and admins).
func (s *Server) editProject(c echo.Context) error {
	project := c.Param("project")
	cl := claims(c)
	if !cl.CanCurate(project) {
		return forbidden("edit project " + project)
	}
	var req api.EditProject
	if err := decodeJSON(c, &req, `{"title"}`); err != nil {
		return err
	}
	if req.Title == nil {
		return fail(http.StatusBadRequest, "invalid", "request body: want JSON {\"title\"}: title missing")
	}
	p, err := s.cfg.Store.EditProject(c.Request().Context(), project, *req.Title, cl.Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, api.ProjectOf(p))
}

// projectMark archives, unarchives or deletes a project (admins only).
func (s *Server) projectMark(c echo.Context) error {
	project := c.Param("project")
	cl := claims(c)
	action := c.Path()[strings.LastIndexByte(c.Path(), '/')+1:] // archive, unarchive or delete
	if cl.Role != RoleAdmin {
		return forbidden(action + " project " + project + " (admin only)")
	}
	ctx := c.Request().Context()
	switch action {
	case "delete":
		var req api.Reason
		if err := decodeJSON(c, &req, `{"reason"}`); err != nil {
			return err
		}
		dels, err := s.cfg.Store.DeleteProject(ctx, project, req.Reason, cl.Subject)
		if err != nil {
			return catalogError(err)
		}
		return c.JSON(http.StatusOK, api.ProjectDeletion{Project: project, Datasets: dels})
	case "unarchive":
		p, err := s.cfg.Store.UnarchiveProject(ctx, project, cl.Subject)
		if err != nil {
			return catalogError(err)
		}
		return c.JSON(http.StatusOK, api.ProjectOf(p))
	}
	reason, err := optionalReason(c)
	if err != nil {
		return err
	}
	p, err := s.cfg.Store.ArchiveProject(ctx, project, reason, cl.Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, api.ProjectOf(p))
}

// withArchived reads the archived= parameter of a list: "true" includes
// archived entries, absent or "false" hides them.
func withArchived(c echo.Context) (bool, error) {
	switch v := c.QueryParam("archived"); v {
	case "", "false":
		return false, nil
	case "true":
		return true, nil
	default:
		return false, fail(http.StatusBadRequest, "invalid", "archived %q: want true or false", truncateParam(v))
	}
}
