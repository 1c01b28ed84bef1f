package server

import (
	"fmt"
	"net/http"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// getDisclosure serves a version's disclosure report as stored: the
// k-anonymity of its case attributes, class sizes, l-diversity and
// prosecutor risk (catalog/disclosure). 404 when the dataset's profile
// declares no attributes.
func (s *Server) getDisclosure(c echo.Context) error {
	v, err := s.versionHead(c)
	if err != nil {
		return err
	}
	b, _, err := s.cfg.Store.DisclosureReport(c.Request().Context(), v.Dataset.Project, v.Dataset.Name, v.Number)
	if err != nil {
		return catalogError(err)
	}
	return c.Blob(http.StatusOK, echo.MIMEApplicationJSON, b)
}

// publishOverride publishes a version above its project's disclosure
// risk threshold; curators only, with a reason that is recorded.
func (s *Server) publishOverride(c echo.Context) error {
	project, name := c.Param("project"), c.Param("dataset")
	cl := claims(c)
	if !cl.CanCurate(project) {
		return forbidden("publish versions of " + project + "/" + name)
	}
	sel, err := catalog.ParseSelector(c.Param("version"))
	if err != nil {
		return catalogError(err)
	}
	if sel.Kind != catalog.SelectNumber {
		return fail(http.StatusBadRequest, "invalid", "publish-override names a version by its number, not %q", sel)
	}
	var req api.Reason
	if err := decodeJSON(c, &req, `{"reason"}`); err != nil {
		return err
	}
	v, err := s.cfg.Store.PublishOverride(c.Request().Context(), project, name, sel.Number, cl.Subject, req.Reason)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, v)
}

// getDisclosurePolicy answers the project's disclosure policy (the
// default when it set none).
func (s *Server) getDisclosurePolicy(c echo.Context) error {
	project := c.Param("project")
	if !claims(c).CanRead(project) {
		return forbidden("read project " + project)
	}
	p, err := s.cfg.Store.Project(c.Request().Context(), project)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, p.DisclosurePolicy())
}

// setDisclosurePolicy sets the project's disclosure policy; curators only.
func (s *Server) setDisclosurePolicy(c echo.Context) error {
	project := c.Param("project")
	cl := claims(c)
	if !cl.CanCurate(project) {
		return forbidden("set the disclosure policy of " + project)
	}
	var req catalog.DisclosurePolicy
	if err := decodeJSON(c, &req, `{"k", "max_risk", "suppress"}`); err != nil {
		return err
	}
	p, err := s.cfg.Store.SetDisclosurePolicy(c.Request().Context(), project, req, cl.Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, p.DisclosurePolicy())
}

// disclosureNote adds to an upload's message that its new version is held
// as a draft because its disclosure risk is above the project's threshold.
func disclosureNote(msg string, v *catalog.Version) string {
	if v == nil || v.Manifest == nil || v.Manifest.Disclosure == nil || !v.Manifest.Disclosure.AboveThreshold || v.State != catalog.StateDraft {
		return msg
	}
	note := fmt.Sprintf("v%d is held as a draft: its disclosure risk (%.3f) is above the project's threshold; see its disclosure report", v.Number, v.Manifest.Disclosure.MaxRisk)
	if msg == "" {
		return note
	}
	return msg + "; " + note
}
