package server

import (
	"context"
	"errors"
	"net/http"
	"time"

	"github.com/golang-jwt/jwt/v5"
	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// TokenRecord turns issued claims into the catalog's record of them.
func TokenRecord(c *Claims, kid string) catalog.TokenRecord {
	r := catalog.TokenRecord{JTI: c.ID, Subject: c.Subject, Role: c.Role, Project: c.Project, Datasets: c.Datasets, Sites: c.Sites, Replace: c.Replace, KeyID: kid}
	if c.IssuedAt != nil {
		r.IssuedAt = c.IssuedAt.UTC()
	}
	if c.ExpiresAt != nil {
		r.ExpiresAt = c.ExpiresAt.UTC()
	}
	return r
}

// IssueRecorded issues a token for g, records it in store and audits the
// issue under by, in that order: a token the catalog could not record is
// not handed out.
func (a *Authority) IssueRecorded(ctx context.Context, st *catalog.Store, by string, g Grant) (string, error) {
	tok, c, err := a.IssueClaims(g)
	if err != nil {
		return "", err
	}
	kid, _ := HeaderKID(tok)
	if err := st.RecordToken(ctx, by, TokenRecord(c, kid)); err != nil {
		return "", err
	}
	return tok, nil
}

// jwks serves the public keys that verify this server's EdDSA tokens, as a
// JWK Set (RFC 7517 section 5, OKP keys per RFC 8037 section 2), so that
// another service can verify them.
func (s *Server) jwks(c echo.Context) error {
	ks, err := s.cfg.Authority.Keys()
	if err != nil {
		return err
	}
	c.Response().Header().Set("Cache-Control", "max-age=300")
	return c.JSON(http.StatusOK, ks.JWKS())
}

func (s *Server) listTokens(c echo.Context) error {
	if claims(c).Role != RoleAdmin {
		return forbidden("list tokens (admin only)")
	}
	if _, err := s.cfg.Store.ImportTokenSpool(c.Request().Context(), s.cfg.TokenSpool); err != nil {
		return err
	}
	recs, err := s.cfg.Store.Tokens(c.Request().Context())
	if err != nil {
		return catalogError(err)
	}
	if recs == nil {
		recs = []catalog.TokenRecord{}
	}
	return c.JSON(http.StatusOK, api.Tokens{Tokens: recs})
}

func (s *Server) issueToken(c echo.Context) error {
	cl := claims(c)
	if cl.Role != RoleAdmin {
		return forbidden("issue tokens (admin only)")
	}
	var req api.IssueToken
	if err := decodeJSON(c, &req, `{"role", "subject", "project", "datasets", "sites", "replace", "ttl"}`); err != nil {
		return err
	}
	ttl, err := time.ParseDuration(req.TTL)
	if err != nil {
		return fail(http.StatusBadRequest, "invalid", "ttl %q: want a duration such as 720h", truncateParam(req.TTL))
	}
	g := Grant{Role: req.Role, Subject: req.Subject, Project: req.Project, Datasets: req.Datasets, Sites: req.Sites, Replace: req.Replace, TTL: ttl}
	tok, err := s.cfg.Authority.IssueRecorded(c.Request().Context(), s.cfg.Store, cl.Subject, g)
	if err != nil {
		if errors.Is(err, catalog.ErrInvalid) || errors.Is(err, catalog.ErrExists) {
			return catalogError(err)
		}
		return fail(http.StatusBadRequest, "invalid", "%s", err.Error())
	}
	return c.JSON(http.StatusCreated, api.Token{Token: tok})
}

func (s *Server) revokeToken(c echo.Context) error {
	cl := claims(c)
	if cl.Role != RoleAdmin {
		return forbidden("revoke tokens (admin only)")
	}
	var req api.Reason
	if err := decodeJSON(c, &req, `{"reason": ...}`); err != nil {
		return err
	}
	rv, err := s.cfg.Store.RevokeToken(c.Request().Context(), cl.Subject, c.Param("jti"), req.Reason)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, rv)
}

// HeaderKID returns the kid of a token's header (the key that signed it).
func HeaderKID(tok string) (string, error) {
	t, _, err := jwt.NewParser().ParseUnverified(tok, &Claims{})
	if err != nil {
		return "", err
	}
	kid, _ := t.Header["kid"].(string)
	return kid, nil
}
