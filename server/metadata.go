package server

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// getMetadata answers a dataset's citation metadata (DataCite terms); an
// empty object when none was set.
func (s *Server) getMetadata(c echo.Context) error {
	d, err := s.dataset(c, (*Claims).CanSeeDataset, "see dataset")
	if err != nil {
		return err
	}
	m, err := s.cfg.Store.DatasetMetadata(c.Request().Context(), d.Project, d.Name)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, m)
}

// setMetadata replaces a dataset's citation metadata (curator).
func (s *Server) setMetadata(c echo.Context) error {
	d, err := s.dataset(c, func(cl *Claims, project, _ string) bool { return cl.CanCurate(project) }, "set the metadata of")
	if err != nil {
		return err
	}
	var m catalog.DatasetMetadata
	if err := decodeJSON(c, &m, `{"creators": [{"name"} | {"given_name", "family_name", "affiliation", "orcid"}], "publisher", "license", "description", "keywords": [...], "related_identifiers": [{"identifier", "type", "relation"}]}`); err != nil {
		return err
	}
	nm, err := s.cfg.Store.SetDatasetMetadata(c.Request().Context(), d.Project, d.Name, m, claims(c).Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, nm)
}
