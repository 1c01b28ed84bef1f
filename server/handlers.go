package server

import (
	"cmp"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"mime"
	"net/http"
	"os"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

func (s *Server) listProjects(c echo.Context) error {
	cl := claims(c)
	archived, err := withArchived(c)
	if err != nil {
		return err
	}
	ps, err := s.cfg.Store.Projects(c.Request().Context())
	if err != nil {
		return err
	}
	out := []api.Project{}
	for i := range ps {
		if cl.CanRead(ps[i].Name) && (archived || ps[i].Archived == nil) {
			out = append(out, api.ProjectOf(&ps[i]))
		}
	}
	return c.JSON(http.StatusOK, out)
}

func (s *Server) createProject(c echo.Context) error {
	cl := claims(c)
	if cl.Role != RoleAdmin {
		return forbidden("create projects (admin only)")
	}
	var req api.CreateProject
	if err := decodeJSON(c, &req, `{"name": ..., "title": ...}`); err != nil {
		return err
	}
	p, err := s.cfg.Store.CreateProject(c.Request().Context(), req.Name, req.Title, cl.Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusCreated, api.ProjectOf(p))
}

func (s *Server) getProject(c echo.Context) error {
	project := c.Param("project")
	if !claims(c).CanRead(project) {
		return forbidden("read project " + project)
	}
	p, err := s.cfg.Store.Project(c.Request().Context(), project)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, api.ProjectOf(p))
}

func (s *Server) listDatasets(c echo.Context) error {
	cl := claims(c)
	project := c.Param("project")
	if !cl.CanRead(project) && !cl.uploadsTo(project) {
		return forbidden("read project " + project)
	}
	archived, err := withArchived(c)
	if err != nil {
		return err
	}
	ds, err := s.cfg.Store.Datasets(c.Request().Context(), project)
	if err != nil {
		return catalogError(err)
	}
	out := []catalog.Dataset{}
	for _, d := range ds {
		if cl.CanSeeDataset(d.Project, d.Name) && (archived || d.Archived == nil) {
			out = append(out, d)
		}
	}
	return c.JSON(http.StatusOK, out)
}

func (s *Server) createDataset(c echo.Context) error {
	cl := claims(c)
	project := c.Param("project")
	if !cl.CanCurate(project) {
		return forbidden("create datasets in project " + project)
	}
	var req api.CreateDataset
	if err := decodeJSON(c, &req, `{"name", "title", "profile", "timezone", "reject_above", "window_from", "window_to", "drafts", "changes", "historical"}`); err != nil {
		return err
	}
	d, err := s.cfg.Store.CreateDataset(c.Request().Context(), catalog.DatasetSpec{
		Project: project, Name: req.Name, Title: req.Title, Profile: []byte(req.Profile),
		Timezone: req.Timezone, RejectAbove: req.RejectAbove, WindowFrom: req.WindowFrom, WindowTo: req.WindowTo,
		Drafts: req.Drafts, Changes: catalog.ChangePolicy(req.Changes), Historical: req.Historical,
	}, cl.Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusCreated, d)
}

func (s *Server) dataset(c echo.Context, may func(*Claims, string, string) bool, what string) (*catalog.Dataset, error) {
	project, name := c.Param("project"), c.Param("dataset")
	if !may(claims(c), project, name) {
		return nil, forbidden(what + " " + project + "/" + name)
	}
	d, err := s.cfg.Store.Dataset(c.Request().Context(), project, name)
	if err != nil {
		return nil, catalogError(err)
	}
	return d, nil
}

// setChanges sets a dataset's change policy (curator): {"changes":
// "refuse" | "correct"}.
func (s *Server) setChanges(c echo.Context) error {
	d, err := s.dataset(c, func(cl *Claims, project, _ string) bool { return cl.CanCurate(project) }, "set the change policy of")
	if err != nil {
		return err
	}
	var req api.SetChanges
	if err := decodeJSON(c, &req, `{"changes": "refuse" | "correct"}`); err != nil {
		return err
	}
	if req.Changes == "" {
		return fail(http.StatusBadRequest, "invalid", "changes: want refuse or correct")
	}
	nd, err := s.cfg.Store.SetChangePolicy(c.Request().Context(), d.Project, d.Name, catalog.ChangePolicy(req.Changes), claims(c).Subject)
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, nd)
}

func (s *Server) getDataset(c echo.Context) error {
	d, err := s.dataset(c, (*Claims).CanSeeDataset, "see dataset")
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, d)
}

// upload streams the request body into the catalog's ingest: the body is
// never held whole in memory nor written raw to disk.
func (s *Server) upload(c echo.Context) error {
	d, err := s.dataset(c, (*Claims).CanUpload, "upload to")
	if err != nil {
		return err
	}
	opt, err := uploadOptions(c)
	if err != nil {
		return err
	}
	if err := partnerMode(claims(c), d, &opt); err != nil {
		return err
	}
	release, err := s.takeUploadSlot(claims(c))
	if err != nil {
		return err
	}
	defer release()
	req := c.Request()
	// The plain ResponseWriter, not echo's wrapper: only net/http's own
	// writer learns from MaxBytesReader that the rest of the body is to be
	// dropped, and then closes the connection after the 413.
	body := sizedBody{http.MaxBytesReader(c.Response().Writer, req.Body, s.cfg.MaxUploadBytes)}
	started := time.Now()
	res, err := s.cfg.Store.Ingest(req.Context(), d.Project, d.Name, body, opt)
	s.metrics.observeUpload(res, time.Since(started))
	if err != nil {
		var he *httpError
		if !errors.As(catalogError(err), &he) {
			if res == nil {
				return err
			}
			s.cfg.Logger.Error("upload failed", "dataset", d.Ref(), "upload", res.Upload.ID, "err", err)
			he = fail(http.StatusInternalServerError, "internal", "the upload failed on the server; the server log has the details; nothing of it was kept")
		}
		if res != nil {
			s.uploadDetail(he, res.Upload)
		}
		return he
	}
	status := http.StatusCreated
	if res.Upload.Status == catalog.UploadDuplicate {
		status = http.StatusOK
	}
	return c.JSON(status, api.UploadResult{Upload: res.Upload, Version: res.Version, Message: disclosureNote(res.Upload.Sentence(), res.Version)})
}

// uploadDetail puts on the error of a failed, rejected or refused upload
// its record and what the server says of it: its status and code come
// from errorStatuses, but for a rejection by the site a partner token is
// bound to, which is a refusal of authorization (403).
func (s *Server) uploadDetail(he *httpError, up catalog.Upload) {
	b := &he.body
	b.Upload = &up
	e := up.Error
	if e != nil {
		b.Rule, b.Line, b.Column = e.Rule, e.Line, e.Column
	}
	switch b.Code {
	case "too_large":
		b.Message = fmt.Sprintf("upload is larger than the server's limit of %d bytes (flowcat serve --max-upload-bytes)", s.cfg.MaxUploadBytes)
	case "body_timeout":
		b.Message = fmt.Sprintf("no byte of the upload's body came for %s (flowcat serve --body-idle-timeout); nothing of it was kept", s.cfg.BodyIdleTimeout)
	case "insufficient_storage":
		b.Message = "the server's disk is full; nothing of the upload was kept; try again later"
	case "client_gone":
		b.Message = "the client went away before the upload was done"
	case "file_invalid":
		b.Message = fileMessage(up.Filename, e)
	case "rejected":
		if e != nil && e.Rule == catalog.RuleSiteNotAllowed {
			b.Status, b.Code = http.StatusForbidden, "forbidden"
			b.Message = "this token may not write site data it is not bound to: " + fileMessage(up.Filename, e)
			return
		}
		rejectedDetail(b, up)
	}
}

// takeUploadSlot counts an upload of the token in progress, or refuses
// it when the token has MaxUploadsPerToken already (429, RFC 6585).
func (s *Server) takeUploadSlot(cl *Claims) (release func(), err error) {
	key := cl.ID
	if key == "" {
		key = "sub:" + cl.Subject
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.uploading[key] >= s.cfg.MaxUploadsPerToken {
		he := fail(http.StatusTooManyRequests, "too_many_uploads", "this token has %d uploads in progress, the server's limit (flowcat serve --max-uploads-per-token); wait for one to finish", s.uploading[key])
		return nil, he
	}
	s.uploading[key]++
	return func() {
		s.mu.Lock()
		defer s.mu.Unlock()
		if s.uploading[key]--; s.uploading[key] <= 0 {
			delete(s.uploading, key)
		}
	}, nil
}

// sizedBody reads an upload's body through http.MaxBytesReader: going
// past the size limit is catalog.ErrUploadTooLarge.
type sizedBody struct{ r io.Reader }

func (b sizedBody) Read(p []byte) (int, error) {
	n, err := b.r.Read(p)
	var mbe *http.MaxBytesError
	if errors.As(err, &mbe) {
		err = fmt.Errorf("%w: %w", catalog.ErrUploadTooLarge, err)
	}
	return n, err
}

// uploadOptions reads an upload's query: filename, mode, and for mode
// replace-window from, to (RFC 3339) and site (repeated or comma-separated).
// They are checked before the body is read.
func uploadOptions(c echo.Context) (catalog.IngestOptions, error) {
	cl := claims(c)
	opt := catalog.IngestOptions{Filename: c.QueryParam("filename"), By: cl.Subject, Mode: catalog.Mode(c.QueryParam("mode"))}
	if cl.Role == RolePartner {
		opt.BoundSites = cl.Sites
	}
	var err error
	if opt.From, opt.To, err = window(c.QueryParams()); err != nil {
		return opt, err
	}
	for _, v := range c.QueryParams()["site"] {
		for _, site := range strings.Split(v, ",") {
			opt.Sites = append(opt.Sites, strings.TrimSpace(site))
		}
	}
	if err := opt.Validate(); err != nil {
		return opt, catalogError(err)
	}
	return opt, nil
}

// rejectedDetail names, in a rejected upload's error, why its rows were
// rejected: the reasons with their counts, most frequent first, and the
// first line (and column) of the most frequent one, which also fills the
// body's rule, line and column. Samples hold no values, so neither does
// the message.
func rejectedDetail(b *api.ErrorBody, up catalog.Upload) {
	if up.Report == nil || len(up.Report.Rejections) == 0 {
		return
	}
	rs := slices.Clone(up.Report.Rejections)
	slices.SortStableFunc(rs, func(x, y quality.RejectionCount) int { return cmp.Compare(y.Count, x.Count) })
	parts := make([]string, 0, 3)
	for i, r := range rs {
		if i == 3 {
			parts = append(parts, fmt.Sprintf("%d more reasons", len(rs)-3))
			break
		}
		parts = append(parts, fmt.Sprintf("%s %d", r.Reason, r.Count))
	}
	file := up.Filename
	if file == "" {
		file = "upload"
	}
	top := rs[0]
	b.Rule = string(top.Reason)
	first := ""
	if len(top.Samples) > 0 {
		s := top.Samples[0]
		b.Line, b.Column = s.Line, s.Column
		first = fmt.Sprintf("; first %s at %s:%d", top.Reason, file, s.Line)
		if s.Column != "" {
			first += fmt.Sprintf(" column %q", s.Column)
		}
	}
	b.Message = fmt.Sprintf("%s: %s; rejected rows by reason: %s%s", file, b.Message, strings.Join(parts, ", "), first)
}

// fileMessage names file, line, column and rule in one sentence.
func fileMessage(file string, e *catalog.UploadError) string {
	if file == "" {
		file = "upload"
	}
	loc := file
	if e.Line > 0 {
		loc += ":" + strconv.FormatInt(e.Line, 10)
	}
	if e.Column != "" {
		loc += fmt.Sprintf(" column %q", e.Column)
	}
	return fmt.Sprintf("%s: %s: %s", loc, e.Rule, e.Message)
}

func (s *Server) listUploads(c echo.Context) error {
	d, err := s.dataset(c, (*Claims).CanSeeDataset, "see uploads of")
	if err != nil {
		return err
	}
	cl := claims(c)
	ups, err := s.cfg.Store.VisibleUploads(c.Request().Context(), d.Project, d.Name, cl.CanUpload(d.Project, d.Name))
	if err != nil {
		return catalogError(err)
	}
	out := slices.DeleteFunc(ups, func(u catalog.Upload) bool { return !seesUpload(cl, d, u) })
	return c.JSON(http.StatusOK, out)
}

// partnerMode refuses a partner's upload in a mode that removes events:
// replace-all removes every site's, replace-window every listed site's in
// the window, which other partners may have sent. A partner appends; a
// curator of the project replaces. A partner token bound to sites and
// granted replace (by whoever issued it) may replace-window those sites
// only: the sites replaced must be among them.
func partnerMode(cl *Claims, d *catalog.Dataset, opt *catalog.IngestOptions) error {
	m := opt.Mode
	if cl.Role != RolePartner || m == catalog.ModeAppend {
		return nil
	}
	if m == catalog.ModeReplaceWindow && cl.Replace && len(cl.Sites) > 0 {
		// No sites given: the upload's own, which the binding checks.
		for _, site := range opt.Sites {
			if !slices.Contains(cl.Sites, site) {
				return fail(http.StatusForbidden, "forbidden", "this token may not replace the events of site %q: it replaces its own sites only (%s)", truncateParam(site), strings.Join(cl.Sites, ", "))
			}
		}
		return nil
	}
	how := "a partner token appends only (mode append)"
	if m == catalog.ModeReplaceWindow {
		how += ", unless its issuer bound it to sites and granted replace"
	}
	return fail(http.StatusForbidden, "forbidden", "this token may not upload in mode %s to %s: %s; %s removes events other partners may have sent, so a curator of project %s uploads in that mode", m, d.Ref(), how, m, d.Project)
}

// seesUpload reports whether the claims see upload u's record: a partner
// sees its own uploads only (by token subject), anyone else who may see
// the dataset's uploads sees every one.
func seesUpload(cl *Claims, d *catalog.Dataset, u catalog.Upload) bool {
	return cl.Role != RolePartner || cl.CanCurate(d.Project) || u.By == cl.Subject
}

// unseenVersions are the versions whose uploads a member may not see:
// those never published. Curators and the dataset's partners see every
// upload (nil).
func (s *Server) unseenVersions(c echo.Context, d *catalog.Dataset) (map[int]bool, error) {
	unseen, err := s.cfg.Store.Unpublished(c.Request().Context(), d.Project, d.Name, claims(c).CanUpload(d.Project, d.Name))
	if err != nil {
		return nil, catalogError(err)
	}
	return unseen, nil
}

func readable(cl *Claims, project, _ string) bool { return cl.CanRead(project) }

// defaultVersionsPage is the page size of the versions list without limit=.
const defaultVersionsPage = 100

// listVersions lists a dataset's versions, oldest first, a page at a
// time (?limit=, default 100, at most catalog.MaxVersionsPage; ?after= a
// version number): each version's record, with its state, lineage mode,
// files, rows, quality scores and event counts, never the manifest or the
// full report.
func (s *Server) listVersions(c echo.Context) error {
	d, err := s.dataset(c, readable, "read versions of")
	if err != nil {
		return err
	}
	limit, after := defaultVersionsPage, 0
	for _, p := range []struct {
		name     string
		dst      *int
		min, max int
	}{{"limit", &limit, 1, catalog.MaxVersionsPage}, {"after", &after, 0, 1<<31 - 1}} {
		v := c.QueryParam(p.name)
		if v == "" {
			continue
		}
		n, err := strconv.Atoi(v)
		if err != nil || n < p.min || n > p.max {
			return fail(http.StatusBadRequest, "invalid", "%s %q: want a whole number from %d to %d", p.name, truncateParam(v), p.min, p.max)
		}
		*p.dst = n
	}
	vs, next, err := s.cfg.Store.VersionsPage(c.Request().Context(), d.Project, d.Name, after, limit, claims(c).CanCurate(d.Project))
	if err != nil {
		return catalogError(err)
	}
	page := api.VersionsPage{Versions: vs}
	if next > 0 {
		page.NextAfter = &next
	}
	return c.JSON(http.StatusOK, page)
}

// version resolves the :version selector (a number, latest, a snapshot id
// prefix or an RFC 3339 instant). Drafts are visible to curators only.
func (s *Server) version(c echo.Context) (*catalog.Version, error) {
	h, err := s.versionHead(c)
	if err != nil {
		return nil, err
	}
	v, err := s.cfg.Store.Version(c.Request().Context(), c.Param("project"), c.Param("dataset"), h.Number)
	if err != nil {
		return nil, catalogError(err)
	}
	return v, nil
}

// versionHead is version without the manifest: for handlers that need
// only the version's name and state.
func (s *Server) versionHead(c echo.Context) (*catalog.Version, error) {
	project, name := c.Param("project"), c.Param("dataset")
	if !readable(claims(c), project, name) {
		return nil, forbidden("read versions of " + project + "/" + name)
	}
	sel, err := catalog.ParseSelector(c.Param("version"))
	if err != nil {
		return nil, catalogError(err)
	}
	h, err := s.cfg.Store.ResolveVersion(c.Request().Context(), project, name, sel, claims(c).CanCurate(project))
	if err != nil {
		return nil, catalogError(err)
	}
	return h, nil
}

// servable is version v for its data: a retracted version answers 410
// Gone with the reason, while its metadata stays readable.
func (s *Server) servable(c echo.Context) (*catalog.Version, error) {
	v, err := s.version(c)
	if err != nil {
		return nil, err
	}
	if err := v.Servable(); err != nil {
		return nil, catalogError(err)
	}
	return v, nil
}

// setState publishes or retracts the version named by number.
func (s *Server) setState(c echo.Context) error {
	project, name := c.Param("project"), c.Param("dataset")
	cl := claims(c)
	action := c.Path()[strings.LastIndexByte(c.Path(), '/')+1:] // publish or retract
	if !cl.CanCurate(project) {
		return forbidden(action + " versions of " + project + "/" + name)
	}
	sel, err := catalog.ParseSelector(c.Param("version"))
	if err != nil {
		return catalogError(err)
	}
	if sel.Kind != catalog.SelectNumber {
		return fail(http.StatusBadRequest, "invalid", "%s names a version by its number, not %q", action, sel)
	}
	ctx := c.Request().Context()
	var v *catalog.Version
	if action == "publish" {
		v, err = s.cfg.Store.Publish(ctx, project, name, sel.Number, cl.Subject)
	} else {
		var req api.Reason
		if err := decodeJSON(c, &req, `{"reason"}`); err != nil {
			return err
		}
		v, err = s.cfg.Store.Retract(ctx, project, name, sel.Number, req.Reason, cl.Subject)
	}
	if err != nil {
		return catalogError(err)
	}
	return c.JSON(http.StatusOK, v)
}

// collectGarbage deletes unreferenced blobs; admins only.
func (s *Server) collectGarbage(c echo.Context) error {
	cl := claims(c)
	if cl.Role != RoleAdmin {
		return forbidden("collect garbage")
	}
	var req api.GC
	if err := decodeJSON(c, &req, `{"dry_run", "grace_seconds"}`); err != nil {
		return err
	}
	opt := catalog.GCOptions{DryRun: req.DryRun}
	if g := req.GraceSeconds; g != nil {
		if !(*g >= 0 && *g <= 365*86400) {
			return fail(http.StatusBadRequest, "invalid", "grace_seconds %v: want 0 to %d", *g, 365*86400)
		}
		opt.Grace = time.Duration(*g * float64(time.Second))
		if opt.Grace == 0 {
			opt.Grace = -1
		}
	}
	res, err := s.cfg.Store.CollectGarbage(c.Request().Context(), opt, cl.Subject)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, res)
}

func (s *Server) getVersion(c echo.Context) error {
	v, err := s.version(c)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, v)
}

// getManifest serves the manifest's canonical JSON, the bytes whose sha256
// is the snapshot id.
func (s *Server) getManifest(c echo.Context) error {
	v, err := s.version(c)
	if err != nil {
		return err
	}
	b, err := s.cfg.Store.ManifestBytes(c.Request().Context(), v)
	if err != nil {
		return catalogError(err)
	}
	c.Response().Header().Set("ETag", `"`+v.SnapshotID.String()+`"`)
	return c.Blob(http.StatusOK, echo.MIMEApplicationJSON, b)
}

// getQuality serves the version's quality report as stored: the bytes
// whose sha256 its manifest names.
func (s *Server) getQuality(c echo.Context) error {
	v, err := s.versionHead(c)
	if err != nil {
		return err
	}
	b, err := s.cfg.Store.QualityReport(c.Request().Context(), v)
	if err != nil {
		return catalogError(err)
	}
	c.Response().Header().Set("ETag", `"`+v.Quality.SHA256.String()+`"`)
	return c.Blob(http.StatusOK, echo.MIMEApplicationJSON, b)
}

// download streams one Parquet file of a version with Content-Length,
// ETag (its sha256) and Range support.
func (s *Server) download(c echo.Context) error {
	v, err := s.servable(c)
	if err != nil {
		return err
	}
	id, err := blob.ParseID(c.Param("file"))
	if err != nil {
		return fail(http.StatusBadRequest, "invalid", "file: want the 64-hex-digit sha256 of a file of the version")
	}
	r, _, err := s.cfg.Store.OpenFile(c.Request().Context(), v, id)
	if err != nil {
		return catalogError(err)
	}
	defer r.Close()
	if err := boundedRange(c.Request().Header.Get("Range"), r.Size()); err != nil {
		c.Response().Header().Set("Content-Range", fmt.Sprintf("bytes */%d", r.Size()))
		return err
	}
	// A download is audited once: a whole-file GET, or a ranged one from
	// byte 0 (a reader fetching parts of a file sends many ranges).
	if rg := c.Request().Header.Get("Range"); c.Request().Method == http.MethodGet && (rg == "" || strings.HasPrefix(rg, "bytes=0-")) {
		if err := s.auditRead(c, "version.download", v, "file "+id.String()); err != nil {
			return err
		}
	}
	h := c.Response().Header()
	h.Set(echo.HeaderContentType, "application/vnd.apache.parquet")
	h.Set("ETag", `"`+id.String()+`"`)
	h.Set("Cache-Control", "private, max-age=31536000, immutable")
	h.Set(echo.HeaderContentDisposition, fmt.Sprintf(`attachment; filename="%s"`, id.String()+".parquet"))
	if req := c.Request(); req.Method == http.MethodGet && !conditional(req.Header) {
		// A whole-file GET (most): http.ServeContent's answer to it,
		// without its two seeks to learn a size the reader knows.
		h.Set("Accept-Ranges", "bytes")
		h.Set(echo.HeaderContentLength, strconv.FormatInt(r.Size(), 10))
		sendWhole(c, r, r.Size())
		return nil
	}
	http.ServeContent(readFromResponse{c.Response()}, c.Request(), "", time.Time{}, r)
	return nil
}

// sendWhole answers 200 with the size bytes of r, the header's fields set.
// The header leaves with the file's first bytes (oneSend, sendConn). It
// is flushed (to the held connection) before the copy: net/http would
// otherwise read the file's first 512 bytes itself, to sniff a type the
// header names, and write them with the header.
func sendWhole(c echo.Context, r io.Reader, size int64) {
	defer oneSend(c)()
	c.Response().WriteHeader(http.StatusOK)
	http.NewResponseController(c.Response().Writer).Flush() //nolint:errcheck // the copy sees a failed connection
	io.CopyN(readFromResponse{c.Response()}, r, size)       //nolint:errcheck // as http.ServeContent: the client sees a short answer
}

// conditional reports whether a request names a range or a precondition
// (RFC 9110 sections 13 and 14), which http.ServeContent answers.
func conditional(h http.Header) bool {
	for _, k := range [...]string{"Range", "If-Match", "If-None-Match", "If-Modified-Since", "If-Unmodified-Since", "If-Range"} {
		if _, ok := h[k]; ok {
			return true
		}
	}
	return false
}

// readFromResponse is echo's response with the ReadFrom of the
// http.ResponseWriter under it, so that http.ServeContent's copy of a blob
// stored as a local file goes from the file to the connection by
// sendfile(2): net/http's writer hands a reader that is a file (or a
// LimitedReader of one) to the TCP connection's ReadFrom, which sends it
// without copying it through the process. Other readers (an S3 object)
// and other connections (HTTP/2) are copied as before. Status and Size are
// kept as echo's Write keeps them, for the access log and the metrics.
type readFromResponse struct{ *echo.Response }

func (w readFromResponse) ReadFrom(r io.Reader) (int64, error) {
	rf, ok := w.Writer.(io.ReaderFrom)
	if !ok {
		return io.Copy(struct{ io.Writer }{w.Response}, r)
	}
	if !w.Committed {
		if w.Status == 0 {
			w.Status = http.StatusOK
		}
		w.WriteHeader(w.Status)
	}
	n, err := rf.ReadFrom(r)
	w.Size += n
	return n, err
}

// maxRanges bounds the ranges of one Range header.
const maxRanges = 16

// boundedRange refuses a Range header of more than maxRanges ranges, or
// whose ranges add up to more than the file (overlaps): RFC 9110 section
// 14.2 lets a server reject such headers, which ask for many times the
// file in one answer. Headers it cannot parse are left to
// http.ServeContent.
func boundedRange(h string, size int64) error {
	spec, ok := strings.CutPrefix(h, "bytes=")
	if !ok {
		return nil
	}
	parts := strings.Split(spec, ",")
	if len(parts) > maxRanges {
		return fail(http.StatusRequestedRangeNotSatisfiable, "range_limit", "Range: %d ranges, more than the limit of %d", len(parts), maxRanges)
	}
	var total int64
	for _, p := range parts {
		a, b, ok := strings.Cut(strings.TrimSpace(p), "-")
		if !ok {
			return nil
		}
		var n int64
		switch {
		case a == "":
			x, err := strconv.ParseInt(b, 10, 64)
			if err != nil {
				return nil
			}
			n = min(x, size)
		default:
			x, err := strconv.ParseInt(a, 10, 64)
			if err != nil {
				return nil
			}
			y := size - 1
			if b != "" {
				if y, err = strconv.ParseInt(b, 10, 64); err != nil {
					return nil
				}
			}
			n = max(min(y, size-1)-x+1, 0)
		}
		total += n
	}
	if total > size {
		return fail(http.StatusRequestedRangeNotSatisfiable, "range_limit", "Range: the ranges add up to %d bytes, more than the file's %d (overlapping ranges)", total, size)
	}
	return nil
}

// maxRequestJSON bounds a JSON request body (a dataset's profile is the
// largest thing one holds).
const maxRequestJSON = 1 << 20

// decodeJSON reads a request body that must be one JSON object of v's
// fields: an unknown field is an error rather than silently dropped, so a
// misspelt "profile" cannot create a dataset with the default profile.
func decodeJSON(c echo.Context, v any, shape string) error {
	err := decodeJSONBody(c, v)
	var mbe *http.MaxBytesError
	switch {
	case errors.As(err, &mbe):
		return fail(http.StatusRequestEntityTooLarge, "too_large", "request body: larger than %d bytes", maxRequestJSON)
	case errors.Is(err, os.ErrDeadlineExceeded):
		return fail(http.StatusRequestTimeout, "body_timeout", "request body: no byte came for a while (flowcat serve --body-idle-timeout)")
	case err != nil:
		return fail(http.StatusBadRequest, "invalid", "request body: want JSON %s: %v", shape, err)
	}
	return nil
}

func decodeJSONBody(c echo.Context, v any) error {
	req := c.Request()
	if ct := req.Header.Get(echo.HeaderContentType); ct != "" {
		mt, _, err := mime.ParseMediaType(ct)
		if err != nil || mt != echo.MIMEApplicationJSON {
			return fmt.Errorf("content type %q, want %s", ct, echo.MIMEApplicationJSON)
		}
	}
	dec := json.NewDecoder(http.MaxBytesReader(c.Response().Writer, req.Body, maxRequestJSON))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		if err == io.EOF {
			return errors.New("the body is empty")
		}
		return err
	}
	if _, err := dec.Token(); err != io.EOF {
		return errors.New("more than one JSON value")
	}
	return nil
}
