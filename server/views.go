package server

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/export"
	"github.com/flowcat-catalog/flowcat/catalog/query"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// parseFilter reads a filter from the query: from and to (RFC 3339), and
// site, queue, type, activity and columns, each repeated or
// comma-separated. The route refuses parameters it does not take (see
// route), so that a misspelt one cannot silently widen a download.
func parseFilter(q url.Values) (export.Filter, error) {
	var f export.Filter
	var err error
	if f.From, f.To, err = window(q); err != nil {
		return f, err
	}
	var empty string
	list := func(name string) []string {
		var out []string
		for _, v := range q[name] {
			for _, x := range strings.Split(v, ",") {
				x = strings.TrimSpace(x)
				if x == "" && name != "queue" && name != "activity" {
					empty = name
				}
				out = append(out, x)
			}
		}
		slices.Sort(out)
		return slices.Compact(out)
	}
	f.Sites, f.Queues, f.Activities = list("site"), list("queue"), list("activity")
	for _, t := range list("type") {
		f.EventTypes = append(f.EventTypes, schema.EventType(t))
	}
	for _, c := range list("columns") {
		f.Columns = append(f.Columns, schema.Field(c))
	}
	if empty != "" {
		return f, fail(http.StatusBadRequest, "invalid", "%s: an empty value (queue= and activity= may be empty, to select events without one)", empty)
	}
	if err := f.Validate(); err != nil {
		return f, fail(http.StatusBadRequest, "invalid", "%s", strings.TrimSuffix(err.Error(), ": "+export.ErrBadFilter.Error()))
	}
	return f, nil
}

// window reads the from and to instants (RFC 3339) of a query; an absent
// one is zero.
func window(q url.Values) (from, to time.Time, err error) {
	for _, p := range []struct {
		name string
		dst  *time.Time
	}{{"from", &from}, {"to", &to}} {
		if v := q.Get(p.name); v != "" {
			t, err := time.Parse(time.RFC3339Nano, v)
			if err != nil {
				return from, to, fail(http.StatusBadRequest, "invalid", "%s %q: want an RFC 3339 instant, such as 2026-03-01T00:00:00Z", p.name, truncateParam(v))
			}
			*p.dst = t.UTC()
		}
	}
	return from, to, nil
}

func truncateParam(s string) string {
	if len(s) > 40 {
		return s[:40] + "..."
	}
	return s
}

// getSummary serves a version's stored summary; with site, queue,
// activity, from or to it computes one from the version's files, reading
// only the row groups the site and window need. The queue and activity
// filters restrict the queue and activity lists (a wait needs the case's
// arrival, which names no queue), site and window filter the events.
func (s *Server) getSummary(c echo.Context) error {
	head, err := s.versionHead(c)
	if err != nil {
		return err
	}
	q := c.QueryParams()
	f, err := parseFilter(q)
	if err != nil {
		return err
	}
	if err := head.Servable(); err != nil {
		return catalogError(err)
	}
	h := c.Response().Header()
	sid := head.SnapshotID.String()
	h.Set("ETag", `"`+sid+`"`)
	if len(q) == 0 {
		// Stored gzip-compressed: sent as it is to a client that takes gzip,
		// decompressed for any other. Both are kept for the next request
		// (serving.go), so that neither costs a read of the catalog and a
		// copy of the summary, nor a decompression, each time.
		h.Add("Vary", "Accept-Encoding")
		ctx, key := c.Request().Context(), head.Dataset.String()+"@"+strconv.Itoa(head.Number)+"/"+sid
		if acceptsGzip(c.Request()) {
			gz, ok := s.summaries.get(key + " gzip")
			if !ok {
				if gz, err = s.cfg.Store.SummaryGzip(ctx, head.Dataset.String(), head.Number); err != nil {
					return catalogError(err)
				}
				s.summaries.put(key+" gzip", gz)
			}
			h.Set(echo.HeaderContentEncoding, "gzip")
			return sendStored(c, gz)
		}
		b, ok := s.summaries.get(key + " json")
		if !ok {
			if b, err = s.cfg.Store.Summary(ctx, head.Dataset.String(), head.Number); err != nil {
				return catalogError(err)
			}
			s.summaries.put(key+" json", b)
		}
		return sendStored(c, b)
	}
	v, err := s.cfg.Store.Version(c.Request().Context(), c.Param("project"), c.Param("dataset"), head.Number)
	if err != nil {
		return catalogError(err)
	}
	sum, st, err := query.FilteredSummary(c.Request().Context(), s.cfg.Store, v, f)
	if err != nil {
		return catalogError(err)
	}
	h.Set("X-Flowcat-Row-Groups-Read", fmt.Sprint(st.RowGroupsRead))
	h.Set("X-Flowcat-Row-Groups-Skipped", fmt.Sprint(st.RowGroupsSkipped+st.FilesSkipped))
	h.Set("X-Flowcat-Bytes-Read", fmt.Sprint(st.BytesRead))
	return c.JSON(http.StatusOK, sum)
}

// acceptsGzip reports whether the request's Accept-Encoding allows gzip
// (RFC 9110 section 12.5.3; a q of 0 refuses it).
func acceptsGzip(r *http.Request) bool {
	for _, part := range strings.Split(r.Header.Get("Accept-Encoding"), ",") {
		name, params, _ := strings.Cut(strings.TrimSpace(part), ";")
		if !strings.EqualFold(strings.TrimSpace(name), "gzip") && strings.TrimSpace(name) != "*" {
			continue
		}
		q := strings.ReplaceAll(strings.TrimSpace(params), " ", "")
		return q != "q=0" && q != "q=0.0" && q != "q=0.00" && q != "q=0.000"
	}
	return false
}

// requestTag is a strong ETag for a deterministic response: the same
// version, format and filter always give the same bytes, as long as the
// writers' layout (export.Layout) stays the same.
func requestTag(v *catalog.Version, format string, f export.Filter) string {
	b, _ := json.Marshal(struct {
		Snapshot, Format, Layout string
		Filter                   export.Filter
	}{v.SnapshotID.String(), format, export.Layout, f})
	sum := sha256.Sum256(b)
	return `"` + hex.EncodeToString(sum[:16]) + `"`
}

// exportVersion streams a version, whole or filtered, as one Parquet or
// CSV file (RFC 4180), in a deterministic order and byte for byte the same
// for the same request.
func (s *Server) exportVersion(c echo.Context) error {
	v, err := s.servable(c)
	if err != nil {
		return err
	}
	q := c.QueryParams()
	format := q.Get("format")
	if format == "" {
		format = "parquet"
	}
	if format != "parquet" && format != "csv" && format != "xes" {
		return fail(http.StatusBadRequest, "invalid", "format %q: want parquet, csv or xes", truncateParam(format))
	}
	f, err := parseFilter(q)
	if err != nil {
		return err
	}
	if format == "xes" && len(f.Columns) > 0 {
		return fail(http.StatusBadRequest, "invalid", "columns: an XES export writes every field (a trace per case needs case_id)")
	}
	tag := requestTag(v, format, f)
	name := fmt.Sprintf("%s-v%d", strings.ReplaceAll(v.Dataset.String(), "/", "-"), v.Number)
	if len(q) > 1 || len(q) == 1 && q.Get("format") == "" {
		name += "-" + strings.Trim(tag, `"`)[:8]
	}
	h := c.Response().Header()
	h.Set("ETag", tag)
	h.Set("Cache-Control", "private, max-age=31536000, immutable")
	if match := c.Request().Header.Get("If-None-Match"); match == tag {
		return c.NoContent(http.StatusNotModified)
	}
	if err := s.auditRead(c, "version.export", v, "format "+format+filterText(q)); err != nil {
		return err
	}
	ctx := c.Request().Context()
	w := c.Response()
	switch format {
	case "xes":
		h.Set(echo.HeaderContentType, "application/xml; charset=utf-8")
		h.Set(echo.HeaderContentDisposition, fmt.Sprintf(`attachment; filename="%s.xes"`, name))
		w.WriteHeader(http.StatusOK)
		_, err = export.WriteXES(ctx, w, query.Source(s.cfg.Store), v.Manifest.Files, f, export.XESOptions{
			Dataset: v.Dataset.String(), Version: v.Number, SnapshotID: v.SnapshotID.String(),
		})
	case "csv":
		h.Set(echo.HeaderContentType, "text/csv; charset=utf-8; header=present")
		h.Set(echo.HeaderContentDisposition, fmt.Sprintf(`attachment; filename="%s.csv"`, name))
		w.WriteHeader(http.StatusOK)
		_, err = export.WriteCSV(ctx, w, query.Source(s.cfg.Store), v.Manifest.Files, f)
	default:
		h.Set(echo.HeaderContentType, "application/vnd.apache.parquet")
		h.Set(echo.HeaderContentDisposition, fmt.Sprintf(`attachment; filename="%s.parquet"`, name))
		w.WriteHeader(http.StatusOK)
		_, err = export.WriteParquet(ctx, w, query.Source(s.cfg.Store), v.Manifest.Files, f, export.ParquetOptions{
			Metadata: map[string]string{"flowcat.dataset": v.Dataset.String(), "flowcat.version": fmt.Sprint(v.Number), "flowcat.snapshot_id": v.SnapshotID.String()},
		})
	}
	if err != nil {
		// The status is sent: cut the body short so the client sees a
		// truncated download rather than a whole-looking file.
		s.cfg.Logger.Error("export interrupted", "dataset", v.Dataset, "version", v.Number, "err", err)
		panic(http.ErrAbortHandler)
	}
	return nil
}

// getCitation serves CITATION.cff (Citation File Format 1.2.0); it stays
// readable for retracted versions.
func (s *Server) getCitation(c echo.Context) error {
	v, err := s.version(c)
	if err != nil {
		return err
	}
	d, err := s.cfg.Store.Dataset(c.Request().Context(), c.Param("project"), c.Param("dataset"))
	if err != nil {
		return catalogError(err)
	}
	b, err := export.Citation(query.CitationInput(c.Request().Context(), s.cfg.Store, d, v, s.cfg.CitationAuthor))
	if err != nil {
		return err
	}
	return c.Blob(http.StatusOK, "application/x-yaml; charset=utf-8", b)
}

// getBundle streams a version as a tar or zip holding its Parquet files,
// manifest.json, a data dictionary, a README, SHA256SUMS and CITATION.cff.
func (s *Server) getBundle(c echo.Context) error {
	v, err := s.servable(c)
	if err != nil {
		return err
	}
	format := c.QueryParam("format")
	if format == "" {
		format = "tar"
	}
	if format != "tar" && format != "zip" {
		return fail(http.StatusBadRequest, "invalid", "format %q: want tar or zip", truncateParam(format))
	}
	// The dictionary describes the profile revision v was read with.
	d, err := s.cfg.Store.DatasetAsRead(c.Request().Context(), v)
	if err != nil {
		return catalogError(err)
	}
	h := c.Response().Header()
	// The bundle's README and citations carry the dataset's metadata: a
	// change of it is a new tag.
	metaTag := ""
	if m, err := s.cfg.Store.DatasetMetadata(c.Request().Context(), d.Project, d.Name); err == nil && !m.UpdatedAt.IsZero() {
		metaTag = "@" + m.UpdatedAt.Format(time.RFC3339Nano)
	}
	tag := requestTag(v, "bundle-"+format+metaTag, export.Filter{})
	h.Set("ETag", tag)
	ct := map[string]string{"tar": "application/x-tar", "zip": "application/zip"}[format]
	h.Set(echo.HeaderContentType, ct)
	h.Set(echo.HeaderContentDisposition, fmt.Sprintf(`attachment; filename="%s-v%d.%s"`, strings.ReplaceAll(d.Ref().String(), "/", "-"), v.Number, format))
	manifest, err := s.cfg.Store.ManifestBytes(c.Request().Context(), v)
	if err != nil {
		return catalogError(err)
	}
	report, err := s.cfg.Store.QualityReport(c.Request().Context(), v)
	if errors.Is(err, catalog.ErrNotFound) {
		report = nil
	} else if err != nil {
		return catalogError(err)
	}
	if err := s.auditRead(c, "version.bundle", v, "format "+format); err != nil {
		return err
	}
	spans, err := s.cfg.Store.KeySpans(c.Request().Context(), d.Project, d.Name)
	if err != nil {
		return catalogError(err)
	}
	c.Response().WriteHeader(http.StatusOK)
	err = export.WriteBundle(c.Request().Context(), c.Response(), format, export.Bundle{
		Dataset: d, Version: v, Manifest: manifest, Quality: report, Open: query.Opener(s.cfg.Store), Citation: query.CitationInput(c.Request().Context(), s.cfg.Store, d, v, s.cfg.CitationAuthor),
		KeySpans: spans,
	})
	if err != nil {
		s.cfg.Logger.Error("bundle interrupted", "dataset", d.Ref(), "version", v.Number, "err", err)
		panic(http.ErrAbortHandler)
	}
	return nil
}

// diffVersions compares versions ?a= and ?b= (any selectors) by content,
// per site and day, with the quality and summary deltas.
func (s *Server) diffVersions(c echo.Context) error {
	d, err := s.dataset(c, readable, "read versions of")
	if err != nil {
		return err
	}
	q := c.QueryParams()
	f, err := parseFilter(q)
	if err != nil {
		return err
	}
	ctx := c.Request().Context()
	drafts := claims(c).CanCurate(d.Project)
	var vs [2]*catalog.Version
	for i, name := range []string{"a", "b"} {
		text := q.Get(name)
		if text == "" {
			return fail(http.StatusBadRequest, "invalid", "diff needs ?a=VERSION&b=VERSION")
		}
		sel, err := catalog.ParseSelector(text)
		if err != nil {
			return catalogError(err)
		}
		v, err := s.cfg.Store.ServableVersion(ctx, d.Project, d.Name, sel, drafts)
		if err != nil {
			return catalogError(err)
		}
		vs[i] = v
	}
	out, err := query.Compare(ctx, s.cfg.Store, vs[0], vs[1], f)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, out)
}

// getTrend serves the score and sub-scores of every upload with a report,
// per site (?site= for one; "*" is all sites), with the drift alerts.
func (s *Server) getTrend(c echo.Context) error {
	d, err := s.dataset(c, (*Claims).CanSeeDataset, "see the quality of")
	if err != nil {
		return err
	}
	points, alerts, err := s.trend(c, d)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, api.Trend{Points: points, Alerts: alerts})
}

// getAlerts lists a dataset's drift alerts, newest first.
func (s *Server) getAlerts(c echo.Context) error {
	d, err := s.dataset(c, (*Claims).CanSeeDataset, "see the alerts of")
	if err != nil {
		return err
	}
	_, alerts, err := s.trend(c, d)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, alerts)
}

// trend is the dataset's trend without the uploads the caller may not
// see: those of versions never published, unless it may upload.
func (s *Server) trend(c echo.Context, d *catalog.Dataset) ([]catalog.TrendPoint, []catalog.UploadAlert, error) {
	points, alerts, err := s.cfg.Store.VisibleTrend(c.Request().Context(), d.Project, d.Name, c.QueryParam("site"), claims(c).CanUpload(d.Project, d.Name))
	if err != nil {
		return nil, nil, catalogError(err)
	}
	return points, alerts, nil
}
