package server

import (
	"fmt"
	"net/http"
	"slices"
	"strings"

	"github.com/labstack/echo/v4"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/disclosure"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// OpenAPIPath is where the server serves its OpenAPI document.
const OpenAPIPath = "/api/v1/openapi.json"

// contract is what the OpenAPI document says of each route, by "METHOD
// path" as the route table has it: a summary, the request body and the
// answers other than errors (every error is problem details). A route of
// the API without an entry here, or an entry without a route, is an error
// of the document (openAPI), so neither can be added alone.
var contract = map[string]contractEntry{
	"GET /api/v1/health": {sum: "Liveness and the event schema's version", out: ok(api.Health{})},
	"GET /healthz":       {sum: "Liveness probe", out: ok(api.Status{})},
	"GET /readyz":        {sum: "Readiness probe: the catalog answers", out: ok(api.Status{})},
	"GET /metrics":       {sum: "Prometheus metrics (text exposition format)", out: media(http.StatusOK, "text/plain")},
	"GET /api/v1/schema": {sum: "The JSON Schema of an event", out: []api.Response{{Status: http.StatusOK, Body: map[string]any{}, Media: "application/schema+json"}}},
	"GET " + OpenAPIPath: {sum: "This document", out: ok(map[string]any{})},
	"GET /static/:name": {sum: "A style sheet or other asset of the pages", out: []api.Response{
		{Status: http.StatusOK, Media: "text/css"}, {Status: http.StatusOK, Media: "application/octet-stream"}}},
	"GET /.well-known/jwks.json": {sum: "The public keys that verify tokens (RFC 7517)", out: ok(api.JWKS{})},

	"GET /api/v1/projects":                              {sum: "List the projects the token may read", out: ok([]api.Project{})},
	"POST /api/v1/projects":                             {sum: "Create a project (admin)", in: api.CreateProject{}, out: created(api.Project{})},
	"GET /api/v1/projects/:project":                     {sum: "Read a project", out: ok(api.Project{})},
	"PATCH /api/v1/projects/:project":                   {sum: "Set a project's title", in: api.EditProject{}, out: ok(api.Project{})},
	"POST /api/v1/projects/:project/archive":            {sum: "Archive a project (admin)", in: api.Reason{}, out: ok(api.Project{})},
	"POST /api/v1/projects/:project/unarchive":          {sum: "Unarchive a project (admin)", out: ok(api.Project{})},
	"POST /api/v1/projects/:project/delete":             {sum: "Delete a project and its datasets (admin)", in: api.Reason{}, out: ok(api.ProjectDeletion{})},
	"GET /api/v1/projects/:project/datasets":            {sum: "List a project's datasets", out: ok([]catalog.Dataset{})},
	"POST /api/v1/projects/:project/datasets":           {sum: "Create a dataset (curator)", in: api.CreateDataset{}, out: created(catalog.Dataset{})},
	"GET /api/v1/projects/:project/disclosure":          {sum: "The project's disclosure policy", out: ok(catalog.DisclosurePolicy{})},
	"PUT /api/v1/projects/:project/disclosure":          {sum: "Set the project's disclosure policy (curator)", in: catalog.DisclosurePolicy{}, out: ok(catalog.DisclosurePolicy{})},
	"GET /api/v1/projects/:project/tokens":              {sum: "List the project's tokens (curator)", out: ok(api.Tokens{})},
	"POST /api/v1/projects/:project/tokens":             {sum: "Issue a member or partner token of the project (curator)", in: api.IssueProjectToken{}, out: created(api.Token{})},
	"POST /api/v1/projects/:project/tokens/:jti/revoke": {sum: "Revoke a token of the project (curator)", in: api.Reason{}, out: ok(catalog.Revocation{})},

	"GET " + dsPath:                 {sum: "Read a dataset", out: ok(catalog.Dataset{})},
	"PATCH " + dsPath:               {sum: "Edit a dataset (curator)", in: api.EditDataset{}, out: ok(catalog.Dataset{})},
	"POST " + dsPath + "/changes":   {sum: "Set a dataset's change policy (curator)", in: api.SetChanges{}, out: ok(catalog.Dataset{})},
	"GET " + dsPath + "/profiles":   {sum: "List a dataset's profile revisions", out: ok(api.ProfileRevisions{})},
	"POST " + dsPath + "/archive":   {sum: "Archive a dataset (curator)", in: api.Reason{}, out: ok(catalog.Dataset{})},
	"POST " + dsPath + "/unarchive": {sum: "Unarchive a dataset (curator)", in: api.Reason{}, out: ok(catalog.Dataset{})},
	"POST " + dsPath + "/delete":    {sum: "Delete a dataset (curator; admin once a version was published)", in: api.Reason{}, out: ok(catalog.Deletion{})},
	"GET " + dsPath + "/metadata":   {sum: "A dataset's citation metadata (DataCite terms)", out: ok(catalog.DatasetMetadata{})},
	"POST " + dsPath + "/metadata":  {sum: "Replace a dataset's citation metadata (curator)", in: catalog.DatasetMetadata{}, out: ok(catalog.DatasetMetadata{})},
	"POST " + dsPath + "/uploads": {sum: "Upload a file of events: streamed, checked, stored as a new version",
		inMedia: "application/octet-stream", out: []api.Response{{Status: http.StatusCreated, Body: api.UploadResult{}}, {Status: http.StatusOK, Body: api.UploadResult{}}}},
	"GET " + dsPath + "/uploads":       {sum: "List a dataset's uploads", out: ok([]catalog.Upload{})},
	"GET " + dsPath + "/versions":      {sum: "List a dataset's versions, a page at a time", out: ok(api.VersionsPage{})},
	"GET " + dsPath + "/diff":          {sum: "Compare two versions: events, quality and summary", out: ok(api.Diff{})},
	"GET " + dsPath + "/quality/trend": {sum: "Quality over the uploads, with drift alerts", out: ok(api.Trend{})},
	"GET " + dsPath + "/alerts":        {sum: "Drift alerts, newest first", out: ok([]catalog.UploadAlert{})},

	"GET " + vPath:                        {sum: "Read a version", out: ok(catalog.Version{})},
	"GET " + vPath + "/manifest":          {sum: "The version's manifest, its canonical bytes", out: ok(catalog.Manifest{})},
	"GET " + vPath + "/quality":           {sum: "The version's quality report as stored", out: ok(quality.Report{})},
	"GET " + vPath + "/summary":           {sum: "The version's summary, or one computed under a filter", out: ok(summary.Summary{})},
	"GET " + vPath + "/disclosure":        {sum: "The version's disclosure report", out: ok(disclosure.Report{})},
	"GET " + vPath + "/citation":          {sum: "CITATION.cff of the version", out: []api.Response{{Status: http.StatusOK, Body: map[string]any{}, Media: "application/x-yaml"}}},
	"GET " + vPath + "/files/:file":       {sum: "Download a Parquet file of the version", out: downloadAnswers},
	"HEAD " + vPath + "/files/:file":      {sum: "The headers of a download", out: downloadAnswers},
	"POST " + vPath + "/publish":          {sum: "Publish a version (curator)", out: ok(catalog.Version{})},
	"POST " + vPath + "/retract":          {sum: "Retract a version (curator)", in: api.Reason{}, out: ok(catalog.Version{})},
	"POST " + vPath + "/publish-override": {sum: "Publish above the disclosure threshold, with a reason (curator)", in: api.Reason{}, out: ok(catalog.Version{})},
	"GET " + vPath + "/export": {sum: "Export the version, whole or filtered, as Parquet, CSV or XES", out: []api.Response{
		{Status: http.StatusOK, Media: "application/vnd.apache.parquet"}, {Status: http.StatusOK, Media: "text/csv"},
		{Status: http.StatusOK, Media: "application/xml"}, {Status: http.StatusNotModified}}},
	"GET " + vPath + "/bundle": {sum: "The version as a tar or zip bundle", out: []api.Response{
		{Status: http.StatusOK, Media: "application/x-tar"}, {Status: http.StatusOK, Media: "application/zip"}}},

	"POST /api/v1/admin/gc":                 {sum: "Delete unreferenced blobs (admin)", in: api.GC{}, out: ok(catalog.GCResult{})},
	"GET /api/v1/admin/tokens":              {sum: "List every token (admin)", out: ok(api.Tokens{})},
	"POST /api/v1/admin/tokens":             {sum: "Issue a token (admin)", in: api.IssueToken{}, out: created(api.Token{})},
	"POST /api/v1/admin/tokens/:jti/revoke": {sum: "Revoke a token (admin)", in: api.Reason{}, out: ok(catalog.Revocation{})},
	"GET /api/v1/audit":                     {sum: "A page of the audit trail", out: ok(api.AuditPage{})},
	"GET /api/v1/audit/export":              {sum: "The audit trail as JSON Lines", out: media(http.StatusOK, "application/x-ndjson")},
}

const (
	dsPath = "/api/v1/projects/:project/datasets/:dataset"
	vPath  = dsPath + "/versions/:version"
)

// contractEntry is one route's entry of contract.
type contractEntry struct {
	sum     string
	in      any    // the JSON request body's type
	inMedia string // the media type of a request body that is not JSON
	out     []api.Response
}

func ok(v any) []api.Response      { return []api.Response{{Status: http.StatusOK, Body: v}} }
func created(v any) []api.Response { return []api.Response{{Status: http.StatusCreated, Body: v}} }
func media(status int, mt string) []api.Response {
	return []api.Response{{Status: status, Media: mt}}
}

// downloadAnswers are the answers of a download: the file, or the ranges asked
// for (RFC 9110 section 14), or http.ServeContent's plain-text refusal of
// a range it cannot satisfy.
var downloadAnswers = []api.Response{
	{Status: http.StatusOK, Media: "application/vnd.apache.parquet"},
	{Status: http.StatusPartialContent, Media: "application/vnd.apache.parquet"},
	{Status: http.StatusPartialContent, Media: "multipart/byteranges"},
	{Status: http.StatusNotModified},
	{Status: http.StatusRequestedRangeNotSatisfiable, Media: "text/plain"},
	{Status: http.StatusRequestedRangeNotSatisfiable, Body: api.Problem{}, Media: api.ProblemMedia},
}

// operations are the API's routes as the OpenAPI document lists them:
// every route but the pages for people (HTML) and the catch-all.
func (s *Server) operations() ([]api.Operation, error) {
	var ops []api.Operation
	var missing []string
	seen := map[string]bool{}
	for _, r := range s.routes {
		if r.page {
			continue
		}
		key := r.method + " " + r.path
		seen[key] = true
		c, ok := contract[key]
		if !ok {
			missing = append(missing, key)
			continue
		}
		ops = append(ops, api.Operation{Method: r.method, Path: r.path, Summary: c.sum, Public: r.public, Query: r.params,
			Body: c.in, BodyMedia: c.inMedia, Responses: c.out})
	}
	for key := range contract {
		if !seen[key] {
			missing = append(missing, key+" (in the contract, not a route)")
		}
	}
	if len(missing) > 0 {
		slices.Sort(missing)
		return nil, fmt.Errorf("openapi: routes without their contract: %s", strings.Join(missing, ", "))
	}
	return ops, nil
}

// buildOpenAPI builds the server's OpenAPI document once, in New: a
// route without its contract is a programming error found by every test.
func (s *Server) buildOpenAPI() {
	ops, err := s.operations()
	if err == nil {
		s.openapi, err = api.Document("flowcat API", "1", ops)
	}
	if err != nil {
		panic(err)
	}
}

// getOpenAPI serves the OpenAPI 3.1 document of the API.
func (s *Server) getOpenAPI(c echo.Context) error {
	return c.Blob(http.StatusOK, echo.MIMEApplicationJSON, s.openapi)
}
