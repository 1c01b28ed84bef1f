// Package api is flowcat's HTTP contract, declared once: every request
// and response body of the JSON API under /api/v1, the problem details of
// its errors (RFC 9457), and the OpenAPI 3.1 document built from these
// types by reflection (openapi.go). The server's handlers encode these
// types and the command line's client decodes them, so the two cannot
// describe the same JSON differently.
package api

import (
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/query"
)

// Project is a project as the API shows it: never its sealed key.
type Project struct {
	Name      string        `json:"name"`
	Title     string        `json:"title,omitempty"`
	CreatedAt time.Time     `json:"created_at"`
	CreatedBy string        `json:"created_by"`
	KeyID     string        `json:"pseudonym_key_id"`
	Archived  *catalog.Mark `json:"archived,omitempty"`
	Deleted   *catalog.Mark `json:"deleted,omitempty"`
}

// ProjectOf is p as the API shows it.
func ProjectOf(p *catalog.Project) Project {
	return Project{Name: p.Name, Title: p.Title, CreatedAt: p.CreatedAt, CreatedBy: p.CreatedBy, KeyID: p.Key.ID, Archived: p.Archived, Deleted: p.Deleted}
}

// CreateProject is the body of POST /projects.
type CreateProject struct {
	Name  string `json:"name"`
	Title string `json:"title,omitempty"`
}

// EditProject is the body of PATCH /projects/{project}.
type EditProject struct {
	Title *string `json:"title,omitempty"`
}

// ProjectDeletion answers the deletion of a project: what became of each
// of its datasets.
type ProjectDeletion struct {
	Project  string             `json:"project"`
	Datasets []catalog.Deletion `json:"datasets"`
}

// CreateDataset is the body of POST /projects/{project}/datasets.
type CreateDataset struct {
	Name        string     `json:"name"`
	Title       string     `json:"title,omitempty"`
	Profile     string     `json:"profile,omitempty"` // YAML text
	Timezone    string     `json:"timezone,omitempty"`
	RejectAbove *float64   `json:"reject_above,omitempty"`
	WindowFrom  *time.Time `json:"window_from,omitempty"`
	WindowTo    *time.Time `json:"window_to,omitempty"`
	Drafts      bool       `json:"drafts,omitempty"`
	Changes     string     `json:"changes,omitempty"` // refuse (default) or correct
	Historical  bool       `json:"historical,omitempty"`
}

// EditDataset is the body of PATCH on a dataset: the members given
// change, the others stay. "window_from"/"window_to" null or absent leave
// the window; "clear_window": true removes it.
type EditDataset struct {
	Title       *string    `json:"title,omitempty"`
	Description *string    `json:"description,omitempty"`
	RejectAbove *float64   `json:"reject_above,omitempty"`
	WindowFrom  *time.Time `json:"window_from,omitempty"`
	WindowTo    *time.Time `json:"window_to,omitempty"`
	ClearWindow bool       `json:"clear_window,omitempty"`
	Profile     *string    `json:"profile,omitempty"` // YAML text; "" for the default profile
	Timezone    *string    `json:"timezone,omitempty"`
}

// SetChanges is the body of POST .../changes: "refuse" or "correct".
type SetChanges struct {
	Changes string `json:"changes"`
}

// Reason is a body that gives only a reason: a retraction, an archive, a
// deletion, a publication over the disclosure threshold, a revocation.
type Reason struct {
	Reason string `json:"reason,omitempty"`
}

// ProfileRevisions lists a dataset's profile revisions.
type ProfileRevisions struct {
	Revisions []catalog.ProfileRevision `json:"revisions"`
}

// UploadResult is the body of an upload's answer, whatever became of it.
type UploadResult struct {
	Upload  catalog.Upload   `json:"upload"`
	Version *catalog.Version `json:"version,omitempty"`
	Message string           `json:"message"` // what happened, in one line
}

// VersionsPage is one page of a dataset's versions.
type VersionsPage struct {
	Versions []catalog.Version `json:"versions"`
	// NextAfter, when set, is the after= of the next page.
	NextAfter *int `json:"next_after,omitempty"`
}

// GC is the body of POST /admin/gc.
type GC struct {
	DryRun       bool     `json:"dry_run,omitempty"`
	GraceSeconds *float64 `json:"grace_seconds,omitempty"`
}

// Diff is the difference between two versions (query.Diff).
type Diff = query.Diff

// VersionRef names a version by number and snapshot (query.VersionRef).
type VersionRef = query.VersionRef

// Trend is a dataset's quality over its uploads, with the drift alerts.
type Trend struct {
	Points []catalog.TrendPoint  `json:"points"`
	Alerts []catalog.UploadAlert `json:"alerts"`
}

// AuditPage is one page of the audit trail.
type AuditPage struct {
	Entries []catalog.AuditEntry `json:"entries"`
	// NextAfter, when set, is the after= of the next page.
	NextAfter string `json:"next_after,omitempty"`
}

// IssueToken is the body of POST /admin/tokens.
type IssueToken struct {
	Role     string   `json:"role"`
	Subject  string   `json:"subject"`
	Project  string   `json:"project,omitempty"`
	Datasets []string `json:"datasets,omitempty"`
	Sites    []string `json:"sites,omitempty"`   // partner: the sites it may write
	Replace  bool     `json:"replace,omitempty"` // partner with sites: may replace-window them
	TTL      string   `json:"ttl,omitempty"`     // a Go duration, e.g. "720h"
}

// IssueProjectToken is the body of POST /projects/{project}/tokens.
type IssueProjectToken struct {
	Role     string   `json:"role"` // member or partner
	Subject  string   `json:"subject"`
	Datasets []string `json:"datasets,omitempty"` // partner: dataset names of the project (or project/dataset)
	Sites    []string `json:"sites,omitempty"`    // partner: the sites it may write
	Replace  bool     `json:"replace,omitempty"`  // partner with sites: may replace-window them
	TTL      string   `json:"ttl,omitempty"`
}

// Token answers the issue of a token: the token itself, shown once.
type Token struct {
	Token string `json:"token"`
}

// Tokens lists token records.
type Tokens struct {
	Tokens []catalog.TokenRecord `json:"tokens"`
}

// Health answers /api/v1/health.
type Health struct {
	Status        string `json:"status"`
	SchemaVersion string `json:"schema_version"`
}

// Status answers the liveness and readiness probes.
type Status struct {
	Status string `json:"status"`
}

// JWK is one public key of a JWKS document (RFC 7517 section 4; OKP keys,
// RFC 8037 section 2).
type JWK struct {
	Kty string `json:"kty"`
	Crv string `json:"crv"`
	X   string `json:"x"`
	KID string `json:"kid"`
	Use string `json:"use"`
	Alg string `json:"alg"`
}

// JWKS is a JWK Set (RFC 7517 section 5).
type JWKS struct {
	Keys []JWK `json:"keys"`
}
