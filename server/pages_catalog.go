package server

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/disclosure"
	"github.com/flowcat-catalog/flowcat/catalog/export"
	"github.com/flowcat-catalog/flowcat/catalog/query"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/web"
)

// Bounds of what one page lists; the rest is a link or a command away.
const (
	pageVersions = 50  // versions per page of the dataset's table
	pageUploads  = 50  // newest uploads on the dataset page
	pageAlerts   = 20  // newest alerts on the dataset page
	pageCompare  = 200 // newest versions offered to compare with
)

func fsReadFile(name string) ([]byte, error) { return fs.ReadFile(web.Static, name) }

var latest, _ = catalog.ParseSelector("latest")

// catalogPage lists the projects and datasets the reader may see, with
// the filters of its query: q (in the project's or dataset's name or
// title), project, site, and from/to (days, YYYY-MM-DD: the dataset's
// events must reach into them).
func (s *Server) catalogPage(c echo.Context) error {
	cl, ctx, q := claims(c), c.Request().Context(), c.QueryParams()
	pg := web.Catalog{Q: q.Get("q"), Site: q.Get("site"), From: q.Get("from"), To: q.Get("to"), Project: q.Get("project"), Partner: cl.Role == RolePartner}
	var from, to time.Time
	status := http.StatusOK
	for _, d := range []struct {
		name, v string
		dst     *time.Time
	}{{"from", pg.From, &from}, {"to", pg.To, &to}} {
		if d.v == "" {
			continue
		}
		t, err := time.Parse(time.DateOnly, d.v)
		if err != nil {
			pg.Problem = fmt.Sprintf("%s %q: want a day, such as 2026-03-01", d.name, truncateParam(d.v))
			status = http.StatusBadRequest
			continue
		}
		*d.dst = t
	}
	if !to.IsZero() {
		to = to.AddDate(0, 0, 1) // the whole day
	}
	ps, err := s.cfg.Store.Projects(ctx)
	if err != nil {
		return err
	}
	sites := map[string]bool{}
	for _, p := range ps {
		if !cl.CanRead(p.Name) && !cl.uploadsTo(p.Name) {
			continue
		}
		pg.ProjectNames = append(pg.ProjectNames, p.Name)
		ds, err := s.cfg.Store.Datasets(ctx, p.Name)
		if err != nil {
			return catalogError(err)
		}
		cp := web.CatalogProject{Name: p.Name, Title: p.Title}
		for i := range ds {
			d := &ds[i]
			if !cl.CanSeeDataset(d.Project, d.Name) {
				continue
			}
			pg.Total++
			e, err := s.catalogEntry(c, d)
			if err != nil {
				return err
			}
			for _, site := range e.Sites {
				sites[site] = true
			}
			if !catalogMatch(&pg, e, from, to) {
				continue
			}
			cp.Datasets = append(cp.Datasets, e)
		}
		if len(cp.Datasets) > 0 {
			pg.Projects = append(pg.Projects, cp)
			pg.Shown += len(cp.Datasets)
		}
	}
	for site := range sites {
		pg.Sites = append(pg.Sites, site)
	}
	slices.Sort(pg.Sites)
	return s.render(c, status, "catalog", "Catalog", nil, pg)
}

func catalogMatch(f *web.Catalog, e web.CatalogDataset, from, to time.Time) bool {
	if f.Project != "" && e.Project != f.Project {
		return false
	}
	if q := strings.ToLower(strings.TrimSpace(f.Q)); q != "" &&
		!strings.Contains(strings.ToLower(e.Project+"/"+e.Name+" "+e.Title), q) {
		return false
	}
	if f.Site != "" && !slices.Contains(e.Sites, f.Site) {
		return false
	}
	if !from.IsZero() || !to.IsZero() {
		if e.From == nil || e.To == nil {
			return false
		}
		if !from.IsZero() && e.To.Before(from) || !to.IsZero() && !e.From.Before(to) {
			return false
		}
	}
	return true
}

// catalogEntry describes one dataset for the catalog: for a reader, its
// newest published version (sites and time range from its quality
// report, its score) and the alerts of each site's newest upload; for a
// partner, the count of its own uploads.
func (s *Server) catalogEntry(c echo.Context, d *catalog.Dataset) (web.CatalogDataset, error) {
	cl, ctx := claims(c), c.Request().Context()
	e := web.CatalogDataset{Project: d.Project, Name: d.Name, Title: d.Title, Readable: cl.CanRead(d.Project)}
	if !e.Readable {
		ups, err := s.cfg.Store.Uploads(ctx, d.Project, d.Name)
		if err != nil {
			return e, catalogError(err)
		}
		for _, u := range ups {
			if u.By == cl.Subject {
				e.Uploads++
			}
		}
		return e, nil
	}
	v, err := s.cfg.Store.ResolveVersion(ctx, d.Project, d.Name, latest, false)
	switch {
	case errors.Is(err, catalog.ErrNotFound):
	case err != nil:
		return e, catalogError(err)
	default:
		e.Latest, e.State, e.Score = v.Number, v.State, v.Quality.Score
		rep, err := s.cfg.Store.Report(ctx, v)
		if err != nil && !errors.Is(err, catalog.ErrNotFound) {
			return e, catalogError(err)
		}
		if rep != nil {
			for _, sc := range rep.Sites.Counts {
				e.Sites = append(e.Sites, sc.Site)
			}
			slices.Sort(e.Sites)
			e.From, e.To = rep.TimeRange.First, rep.TimeRange.Last
		}
	}
	points, alerts, err := s.visibleTrend(c, d)
	if err != nil {
		return e, err
	}
	e.OpenAlerts = len(openAlerts(points, alerts))
	return e, nil
}

// openAlerts are the alerts of the newest upload of each site: those a
// later upload of the site has not yet answered.
func openAlerts(points []catalog.TrendPoint, alerts []catalog.UploadAlert) []catalog.UploadAlert {
	newest := map[string]int{}
	for _, p := range points {
		newest[p.Site] = max(newest[p.Site], p.Seq)
	}
	var out []catalog.UploadAlert
	for _, a := range alerts {
		if a.Seq == newest[a.Site] {
			out = append(out, a)
		}
	}
	return out
}

// visibleTrend is the dataset's trend over all sites without the uploads
// the reader may not see (as the API's trend).
func (s *Server) visibleTrend(c echo.Context, d *catalog.Dataset) ([]catalog.TrendPoint, []catalog.UploadAlert, error) {
	points, alerts, err := s.cfg.Store.VisibleTrend(c.Request().Context(), d.Project, d.Name, "", claims(c).CanUpload(d.Project, d.Name))
	if err != nil {
		return nil, nil, catalogError(err)
	}
	return points, alerts, nil
}

func datasetCrumbs(d *catalog.Dataset, here bool) []web.Crumb {
	cr := []web.Crumb{{Label: d.Project, Href: "/catalog?project=" + url.QueryEscape(d.Project)}}
	if here {
		return append(cr, web.Crumb{Label: d.Name})
	}
	return append(cr, web.Crumb{Label: d.Name, Href: "/view/" + d.Project + "/" + d.Name})
}

// datasetPage shows one dataset. Readers (members, curators) see its
// versions, quality trend, alerts, the pull command and the citation;
// a partner sees the profile and its own uploads only.
func (s *Server) datasetPage(c echo.Context) error {
	d, err := s.dataset(c, (*Claims).CanSeeDataset, "see dataset")
	if err != nil {
		return err
	}
	cl, ctx := claims(c), c.Request().Context()
	pg := web.DatasetPage{D: d, Readable: cl.CanRead(d.Project), Curator: cl.CanCurate(d.Project)}
	pg.Partner = !pg.Readable
	if pg.Readable {
		after := 0
		if a := c.QueryParam("after"); a != "" {
			if after, err = strconv.Atoi(a); err != nil || after < 0 {
				return fail(http.StatusBadRequest, "invalid", "after %q: want a version number", truncateParam(a))
			}
		}
		vs, next, err := s.cfg.Store.VersionsPage(ctx, d.Project, d.Name, after, pageVersions, pg.Curator)
		if err != nil {
			return catalogError(err)
		}
		pg.NextAfter = next
		for _, h := range vs {
			v, err := s.cfg.Store.Version(ctx, d.Project, d.Name, h.Number)
			if err != nil {
				return catalogError(err)
			}
			row := web.VersionRow{Version: h, Parent: v.Manifest.Parent, Lineage: v.Manifest.Lineage}
			if ct := v.Manifest.CaseTable; ct != nil {
				row.Cases, row.HasCases = ct.Rows, true
			}
			pg.Versions = append(pg.Versions, row)
		}
		points, alerts, err := s.visibleTrend(c, d)
		if err != nil {
			return err
		}
		bySite := map[string][]catalog.TrendPoint{}
		for _, p := range points {
			bySite[p.Site] = append(bySite[p.Site], p)
		}
		for site := range bySite {
			if site != quality.AllSites {
				pg.Sites = append(pg.Sites, site)
			}
		}
		slices.Sort(pg.Sites)
		for _, site := range append([]string{quality.AllSites}, pg.Sites...) {
			if p := web.Trend(site, bySite[site], alerts); p != nil {
				pg.Trends = append(pg.Trends, p)
			}
		}
		if len(alerts) > pageAlerts {
			pg.AlertsMore = len(alerts) - pageAlerts
			alerts = alerts[:pageAlerts]
		}
		pg.Alerts = alerts
		v, err := s.cfg.Store.ResolveVersion(ctx, d.Project, d.Name, latest, false)
		if errors.Is(err, catalog.ErrNotFound) && pg.Curator {
			v, err = s.cfg.Store.ResolveVersion(ctx, d.Project, d.Name, latest, true)
		}
		switch {
		case errors.Is(err, catalog.ErrNotFound):
		case err != nil:
			return catalogError(err)
		default:
			pg.Cite = v
			pg.Pull = pullCommand(d, v)
			b, err := export.Citation(query.CitationInput(ctx, s.cfg.Store, d, v, s.cfg.CitationAuthor))
			if err != nil {
				return err
			}
			pg.Citation = string(b)
		}
	}
	ups, err := s.cfg.Store.Uploads(ctx, d.Project, d.Name)
	if err != nil {
		return catalogError(err)
	}
	unseen, err := s.unseenVersions(c, d)
	if err != nil {
		return err
	}
	ups = slices.DeleteFunc(ups, func(u catalog.Upload) bool {
		if pg.Partner {
			return u.By != cl.Subject
		}
		return unseen[u.Version]
	})
	slices.Reverse(ups)
	if len(ups) > pageUploads {
		pg.UploadsMore = len(ups) - pageUploads
		ups = ups[:pageUploads]
	}
	pg.Uploads = ups
	if pg.Curator {
		if pg.Audit, pg.AuditMore, err = s.datasetAudit(ctx, d); err != nil {
			return err
		}
	}
	return s.render(c, http.StatusOK, "dataset", d.Project+"/"+d.Name, datasetCrumbs(d, true), pg)
}

// pageAuditEntries is how many audit entries the dataset page shows.
const pageAuditEntries = 20

// datasetAudit returns the newest audit entries of d for its curators,
// newest first, and whether older ones exist.
func (s *Server) datasetAudit(ctx context.Context, d *catalog.Dataset) ([]catalog.AuditEntry, bool, error) {
	return s.cfg.Store.AuditNewest(ctx, catalog.AuditFilter{Project: d.Project, Dataset: d.Name, Limit: pageAuditEntries})
}

func pullCommand(d *catalog.Dataset, v *catalog.Version) string {
	ref := fmt.Sprintf("%s/%s@%d", d.Project, d.Name, v.Number)
	return fmt.Sprintf("flowcat pull %s -o %s-v%d\nflowcat verify %[2]s-v%[3]d", ref, d.Name, v.Number)
}

// versionPage shows one version: its record, quality report, summary
// charts, downloads, citation, a comparison with another version, and to
// curators the forms to publish and withdraw it.
func (s *Server) versionPage(c echo.Context) error {
	v, err := s.version(c)
	if err != nil {
		return err
	}
	cl, ctx := claims(c), c.Request().Context()
	d, err := s.cfg.Store.Dataset(ctx, c.Param("project"), c.Param("dataset"))
	if err != nil {
		return catalogError(err)
	}
	curator := cl.CanCurate(d.Project)
	pg := web.VersionPage{D: d, V: v, Curator: curator, Base: fmt.Sprintf("/view/%s/%s/%d", d.Project, d.Name, v.Number)}
	if pg.Report, err = s.cfg.Store.Report(ctx, v); err != nil && !errors.Is(err, catalog.ErrNotFound) {
		return catalogError(err)
	}
	b, err := export.Citation(query.CitationInput(ctx, s.cfg.Store, d, v, s.cfg.CitationAuthor))
	if err != nil {
		return err
	}
	pg.Citation = string(b)
	if v.Manifest.Disclosure != nil {
		raw, _, err := s.cfg.Store.DisclosureReport(ctx, d.Project, d.Name, v.Number)
		if err != nil {
			return catalogError(err)
		}
		var rep disclosure.Report
		if err := json.Unmarshal(raw, &rep); err != nil {
			return fmt.Errorf("disclosure report of %s@%d: %w", d.Ref(), v.Number, err)
		}
		pg.Disclosure = &rep
	}
	if v.State != catalog.StateRetracted {
		sum, err := s.cfg.Store.DecodedSummary(ctx, v)
		if err != nil {
			return catalogError(err)
		}
		pg.Summary = sum
		pg.Figures = web.VersionFigures(sum)
		for _, st := range sum.Sites {
			pg.Sites = append(pg.Sites, st.Name)
		}
		for _, q := range sum.Queues {
			pg.Queues = append(pg.Queues, q.Name)
		}
		for _, a := range sum.Activities {
			pg.Activities = append(pg.Activities, a.Name)
		}
		for t := range sum.EventTypes {
			pg.Types = append(pg.Types, t)
		}
		slices.Sort(pg.Types)
		for _, f := range schema.Fields {
			pg.Columns = append(pg.Columns, string(f))
		}
		pg.Files = v.Manifest.Blobs()
		pg.Pull = pullCommand(d, v)
		heads, err := s.cfg.Store.Heads(ctx, d.Project, d.Name)
		if err != nil {
			return catalogError(err)
		}
		for _, h := range heads {
			if h.Visible(curator) && h.State != catalog.StateRetracted && h.Number != v.Number {
				pg.Others = append(pg.Others, h)
			}
		}
		if len(pg.Others) > pageCompare {
			pg.Others = pg.Others[len(pg.Others)-pageCompare:]
		}
		if w := c.QueryParam("diff"); w != "" {
			if err := s.pageDiff(ctx, &pg, w); err != nil {
				return err
			}
		}
	}
	crumbs := append(datasetCrumbs(d, false), web.Crumb{Label: "version " + strconv.Itoa(v.Number)})
	return s.render(c, http.StatusOK, "version", fmt.Sprintf("%s/%s@%d", d.Project, d.Name, v.Number), crumbs, pg)
}

// pageDiff compares the version of pg with version w, one of pg.Others.
func (s *Server) pageDiff(ctx context.Context, pg *web.VersionPage, w string) error {
	n, err := strconv.Atoi(w)
	if err != nil {
		return fail(http.StatusBadRequest, "invalid", "diff %q: want a version number", truncateParam(w))
	}
	i := slices.IndexFunc(pg.Others, func(o catalog.Version) bool { return o.Number == n })
	if i < 0 {
		return fail(http.StatusNotFound, "not_found", "version %d of %s: none you can compare with", n, pg.D.Ref())
	}
	other, err := s.cfg.Store.Version(ctx, pg.D.Project, pg.D.Name, n)
	if err != nil {
		return catalogError(err)
	}
	pair := [2]*catalog.Version{other, pg.V}
	if n > pg.V.Number {
		pair = [2]*catalog.Version{pg.V, other}
	}
	res, err := query.Compare(ctx, s.cfg.Store, pair[0], pair[1], export.Filter{})
	if err != nil {
		return catalogError(err)
	}
	pg.DiffWith, pg.Diff = n, res
	return nil
}

// curatePage publishes or withdraws a version from the version page's
// forms (curators only), then shows the page again.
func (s *Server) curatePage(c echo.Context) error {
	project, name := c.Param("project"), c.Param("dataset")
	cl, ctx := claims(c), c.Request().Context()
	action := c.Path()[strings.LastIndexByte(c.Path(), '/')+1:]
	if !cl.CanCurate(project) {
		return forbidden(action + " versions of " + project + "/" + name)
	}
	n, err := strconv.Atoi(c.Param("version"))
	if err != nil || n < 1 {
		return fail(http.StatusBadRequest, "invalid", "%s names a version by its number, not %q", action, truncateParam(c.Param("version")))
	}
	if action == "publish" {
		_, err = s.cfg.Store.Publish(ctx, project, name, n, cl.Subject)
	} else {
		reason := strings.TrimSpace(c.Request().PostForm.Get("reason"))
		if reason == "" {
			return fail(http.StatusBadRequest, "invalid", "withdrawing a version needs a reason, which its readers will see")
		}
		_, err = s.cfg.Store.Retract(ctx, project, name, n, reason, cl.Subject)
	}
	if err != nil {
		return catalogError(err)
	}
	return c.Redirect(http.StatusSeeOther, fmt.Sprintf("/view/%s/%s/%d", project, name, n))
}

// exportPage serves the version page's export form: days (YYYY-MM-DD, in
// the dataset's zone; "to" includes its whole day) become RFC 3339
// instants, empty fields are dropped, and the API's export does the rest.
func (s *Server) exportPage(c echo.Context) error {
	d, err := s.dataset(c, readable, "read versions of")
	if err != nil {
		return err
	}
	loc, err := time.LoadLocation(d.Timezone)
	if err != nil {
		loc = time.UTC
	}
	q := url.Values{}
	for k, vs := range c.QueryParams() {
		for _, v := range vs {
			if v == "" && k != "queue" {
				continue
			}
			if k == "from" || k == "to" {
				if day, err := time.ParseInLocation(time.DateOnly, v, loc); err == nil {
					if k == "to" {
						day = day.AddDate(0, 0, 1)
					}
					v = day.UTC().Format(time.RFC3339)
				}
			}
			q.Add(k, v)
		}
	}
	// echo keeps the parsed query in the context: replace it in place.
	qp := c.QueryParams()
	clear(qp)
	for k, vs := range q {
		qp[k] = vs
	}
	c.Request().URL.RawQuery = q.Encode()
	return s.exportVersion(c)
}
