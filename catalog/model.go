package catalog

import (
	"encoding/json"
	"errors"
	"fmt"
	"regexp"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/quality"
)

// Errors callers branch on.
var (
	ErrNotFound    = errors.New("not found")
	ErrExists      = errors.New("already exists")
	ErrInvalid     = errors.New("invalid")
	ErrRejected    = errors.New("upload rejected")
	ErrFileInvalid = errors.New("file invalid")
)

var nameRE = regexp.MustCompile(`^[a-z0-9][a-z0-9._-]{0,62}$`)

// ValidName checks a project or dataset name: 1 to 63 characters of
// lowercase letters, digits, '.', '_' and '-', starting with a letter or
// digit, so names are safe in URLs, paths and bbolt keys.
func ValidName(kind, s string) error {
	if !nameRE.MatchString(s) {
		return fmt.Errorf("%s name %q: want 1-63 of a-z 0-9 . _ -, starting with a letter or digit: %w", kind, s, ErrInvalid)
	}
	return nil
}

// Project groups datasets under one pseudonym key: the same raw identifier
// gets the same pseudonym in every dataset of a project, and unrelated
// pseudonyms in any other project.
type Project struct {
	Name      string              `json:"name"`
	Title     string              `json:"title,omitempty"`
	CreatedAt time.Time           `json:"created_at"`
	CreatedBy string              `json:"created_by"`
	Key       anonymize.SealedKey `json:"key"`
	// PriorKeys are the project's earlier key generations, oldest first,
	// sealed like Key: a rotation (Store.RotateProjectKey) moves Key here
	// and draws a new one. Every new upload's identifiers go through the
	// whole chain (anonymize.OpenKeyChain). Absent in projects never
	// rotated.
	PriorKeys []anonymize.SealedKey `json:"prior_keys,omitempty"`
	// Disclosure is the project's disclosure control; nil means
	// DefaultDisclosurePolicy (attributes.go).
	Disclosure *DisclosurePolicy `json:"disclosure,omitempty"`
	// Archived marks a read-only project: its datasets take no uploads
	// and no changes; lists hide it unless asked.
	Archived *Mark `json:"archived,omitempty"`
	// Deleted marks a deleted project (see Store.DeleteProject); the
	// record stays so that the name is not reused and its versions'
	// citations still resolve.
	Deleted *Mark `json:"deleted,omitempty"`
}

// Mark records a change of standing (archived, deleted): when, by whom
// and why.
type Mark struct {
	At     time.Time `json:"at"`
	By     string    `json:"by"`
	Reason string    `json:"reason,omitempty"`
}

// Dataset is one stream of uploads from partner sites through one mapping
// profile. Its versions are numbered from 1.
type Dataset struct {
	Project     string     `json:"project"`
	Name        string     `json:"name"`
	Title       string     `json:"title,omitempty"`
	Description string     `json:"description,omitempty"`
	Profile     string     `json:"profile"`      // the mapping profile, YAML as given
	ProfileHash string     `json:"profile_hash"` // schema.Profile.Hash of the effective profile
	Timezone    string     `json:"timezone"`     // IANA zone for wall-clock times
	RejectAbove float64    `json:"reject_above"` // an upload with a larger share of invalid rows is rejected whole
	Drafts      bool       `json:"drafts"`       // new versions start as drafts, to be published by a curator
	WindowFrom  *time.Time `json:"window_from,omitempty"`
	WindowTo    *time.Time `json:"window_to,omitempty"`
	Historical  bool       `json:"historical,omitempty"` // past events: currentness not scored
	CreatedAt   time.Time  `json:"created_at"`
	CreatedBy   string     `json:"created_by"`
	Latest      int        `json:"latest_version"` // 0 before the first accepted upload
	Uploads     int        `json:"uploads"`        // uploads received, accepted or not

	// Changes is what an upload does to a held event it re-sends with other
	// content, under a stable event_id (see ChangePolicy); empty means
	// ChangesRefuse.
	Changes ChangePolicy `json:"changes,omitempty"`

	// ProfileRevision numbers the dataset's profile (with its zone): 1 at
	// creation, one more at each change (see Store.EditDataset). 0 in
	// records made before revisions were kept means 1.
	ProfileRevision int `json:"profile_revision,omitempty"`
	// Archived marks a read-only dataset: no uploads, no changes, hidden
	// from lists unless asked; its versions stay readable and pullable.
	Archived *Mark `json:"archived,omitempty"`
	// Deleted marks a deleted dataset (see Store.DeleteDataset).
	Deleted *Mark `json:"deleted,omitempty"`
}

// Revision returns the dataset's profile revision (1 for records made
// before revisions were kept).
func (d *Dataset) Revision() int { return max(d.ProfileRevision, 1) }

// Ref returns the dataset's reference, "project/dataset".
func (d *Dataset) Ref() DatasetRef { return DatasetRef{Project: d.Project, Name: d.Name} }

// DefaultRejectAbove is the share of invalid rows above which an upload is
// rejected when a dataset does not set its own threshold.
const DefaultRejectAbove = 0.05

// UploadStatus says what became of an upload.
type UploadStatus string

// Upload statuses.
const (
	UploadAccepted  UploadStatus = "accepted"  // a new version was created
	UploadDuplicate UploadStatus = "duplicate" // identical bytes were accepted before; no new version
	UploadRejected  UploadStatus = "rejected"  // too many invalid rows; nothing stored
	UploadFailed    UploadStatus = "failed"    // the file could not be read; nothing stored
)

// Upload records one file received for a dataset, whatever became of it.
// It holds no raw data: the digest is a SHA-256 of the whole file, the
// error and report name lines, columns and rules, never identifier values.
type Upload struct {
	ID       UploadID        `json:"id"`
	Seq      int             `json:"seq"`
	Dataset  DatasetRef      `json:"dataset"`
	Filename string          `json:"filename,omitempty"`
	Bytes    int64           `json:"bytes"`
	SHA256   string          `json:"sha256,omitempty"` // of the bytes as sent
	Mode     Mode            `json:"mode"`
	Status   UploadStatus    `json:"status"`
	Version  int             `json:"version,omitempty"`
	Error    *UploadError    `json:"error,omitempty"`
	Report   *quality.Report `json:"report,omitempty"` // its events' quality; a duplicate's is RowsOnly
	Unmapped []string        `json:"unmapped_columns,omitempty"`
	Events   *EventCounts    `json:"events,omitempty"` // what became of its valid events: new, already held, copies, changed
	Alerts   []quality.Alert `json:"alerts,omitempty"` // drift against the site's recent uploads
	// RejectedBefore counts the rows the upload rejected that an upload
	// the version compared with holds rejected too (the same text: a
	// broken row sent again); they are among Report.Rows.Rejected.
	RejectedBefore int64     `json:"rejected_before,omitempty"`
	ReceivedAt     time.Time `json:"received_at"`
	By             string    `json:"by"`
}

// UploadError is why a file could not be read, located in the file.
type UploadError struct {
	Rule    string `json:"rule"`
	Line    int64  `json:"line,omitempty"`
	Column  string `json:"column,omitempty"`
	Message string `json:"message"`
}

// FileEntry is one Parquet file of a version.
type FileEntry struct {
	SHA256  blob.ID   `json:"sha256"`
	Bytes   int64     `json:"bytes"`
	Rows    int64     `json:"rows"`
	Upload  UploadID  `json:"upload"`
	MinTime time.Time `json:"min_occurred_at"`
	MaxTime time.Time `json:"max_occurred_at"`
	// RowGroup is the most rows of a row group: a group also ends once
	// its string values reach 16 MiB (long free text), so readers take
	// the groups from the file's footer.
	RowGroup int64 `json:"row_group_rows"`
	// DerivedFrom names, for a file a replace-window upload rewrote without
	// some of its rows, the file its upload made (the first of a chain of
	// rewrites). The rewritten file records it in its metadata too.
	DerivedFrom *blob.ID `json:"derived_from,omitempty"`
	// Attributes are the file's event attribute columns, after the
	// schema's, in this order, with their types, roles and rules; absent
	// for a file without (every file written before they existed). A
	// pointer keeps FileEntry comparable; compare files by SHA256.
	Attributes *AttributeColumns `json:"attributes,omitempty"`
}

// Mode says how an upload's events combine with the dataset's latest
// version.
type Mode string

// Upload modes.
const (
	// ModeAppend adds the upload's events to those of the latest version.
	ModeAppend Mode = "append"
	// ModeReplaceWindow removes the latest version's events of the given
	// sites inside a time window, then adds the upload's, which must all
	// lie inside that window and belong to those sites.
	ModeReplaceWindow Mode = "replace-window"
	// ModeReplaceAll makes the upload's events the whole new version.
	ModeReplaceAll Mode = "replace-all"
)

// ParseMode returns the mode named s; empty means ModeAppend.
func ParseMode(s string) (Mode, error) {
	switch m := Mode(s); m {
	case "":
		return ModeAppend, nil
	case ModeAppend, ModeReplaceWindow, ModeReplaceAll:
		return m, nil
	}
	return "", fmt.Errorf("upload mode %q: want append, replace-window or replace-all: %w", s, ErrInvalid)
}

// Lineage says how a version came from its parent.
type Lineage struct {
	Mode   Mode     `json:"mode"`
	Upload UploadID `json:"upload"` // the upload that made this version
	// For ModeReplaceWindow: the half-open window [From, To) and the sites
	// whose events in it were replaced.
	From  *time.Time `json:"from,omitempty"`
	To    *time.Time `json:"to,omitempty"`
	Sites []string   `json:"sites,omitempty"`
	// RowsRemoved counts the parent's rows the upload replaced (or, for a
	// correction, the old events its changed ones replaced).
	RowsRemoved int64 `json:"rows_removed"`
	// Events counts the upload's valid events by what became of them; the
	// version holds the parent's rows + New + Changed (when taken as
	// corrections) - RowsRemoved.
	Events *EventCounts `json:"events,omitempty"`
	// Suppressed counts the cases whose quasi-identifiers were suppressed
	// because their equivalence class was below the project's k.
	Suppressed int64 `json:"suppressed_cases,omitempty"`
}

// Manifest describes a version completely: its files and how they came to
// be. Its canonical bytes are made once, at commit (canonical), stored
// under the version's snapshot id (their SHA-256), and served as stored;
// a Manifest value is only ever decoded from them to be used.
type Manifest struct {
	Dataset       DatasetRef `json:"dataset"`
	Version       int        `json:"version"`
	Parent        int        `json:"parent,omitempty"`
	Lineage       Lineage    `json:"lineage"`
	SchemaVersion string     `json:"schema_version"`
	ProfileHash   string     `json:"profile_hash"`
	// ProfileRevision is the dataset's profile revision the version's
	// upload was read with; absent (0) in manifests made before
	// revisions were kept, which were all read with revision 1.
	ProfileRevision int         `json:"profile_revision,omitempty"`
	KeyID           string      `json:"pseudonym_key_id"`
	Files           []FileEntry `json:"files"`
	// CaseTable is the version's case table, one row per case over all its
	// files; absent in versions made before case tables were kept.
	CaseTable *CaseTableEntry `json:"case_table,omitempty"`
	Rows      int64           `json:"rows"`
	Uploads   []UploadID      `json:"uploads"`
	// Quality names the version's full quality report, stored beside the
	// manifest. Manifests made before reports moved out of them hold the
	// report itself in a "quality" member instead, and no reference.
	Quality   *ReportRef `json:"quality_report,omitempty"`
	CreatedBy string     `json:"created_by"`
	CreatedAt time.Time  `json:"created_at"`

	// CaseAttributes is the version's case attribute table, row for row
	// beside the case table, and Disclosure its disclosure report; both
	// absent when the profile declares no attributes.
	CaseAttributes *AttributeTable `json:"case_attributes,omitempty"`
	Disclosure     *DisclosureRef  `json:"disclosure,omitempty"`
}

// ReportRef names a stored quality report by the SHA-256 of its JSON.
type ReportRef struct {
	SHA256 blob.ID  `json:"sha256"`
	Bytes  int64    `json:"bytes"`
	Score  *float64 `json:"score"` // the overall score; null when nothing could be scored
}

// canonical returns the manifest's canonical JSON: encoding/json of the
// struct (fixed field order, times in RFC 3339 UTC), no indentation, no
// trailing newline. Only the commit calls it: afterwards the stored bytes
// are the manifest.
func (m *Manifest) canonical() ([]byte, error) {
	c := *m
	c.CreatedAt = c.CreatedAt.UTC()
	b, err := json.Marshal(&c)
	if err != nil {
		return nil, fmt.Errorf("manifest: %w", err)
	}
	return b, nil
}

// BlobEntry is one stored file a manifest names, with the path it has in
// a pulled directory and in a bundle.
type BlobEntry struct {
	Path   string  // relative, slash-separated
	SHA256 blob.ID //
	Bytes  int64
	Rows   int64
}

// Blobs lists every stored file of the version, in manifest order: what a
// pull fetches, a bundle carries, verify checks and the collector keeps.
// A new kind of file joins the version by joining this list.
func (m *Manifest) Blobs() []BlobEntry {
	out := make([]BlobEntry, 0, len(m.Files)+1)
	for _, f := range m.Files {
		out = append(out, BlobEntry{Path: DataPath(f.SHA256), SHA256: f.SHA256, Bytes: f.Bytes, Rows: f.Rows})
	}
	if ct := m.CaseTable; ct != nil {
		out = append(out, BlobEntry{Path: CasesPath(ct.SHA256), SHA256: ct.SHA256, Bytes: ct.Bytes, Rows: ct.Rows})
	}
	if at := m.CaseAttributes; at != nil {
		out = append(out, BlobEntry{Path: AttributesPath(at.SHA256), SHA256: at.SHA256, Bytes: at.Bytes, Rows: at.Rows})
	}
	return out
}

// Blob returns the entry of Blobs with the given id.
func (m *Manifest) Blob(id blob.ID) (BlobEntry, bool) {
	for _, b := range m.Blobs() {
		if b.SHA256 == id {
			return b, true
		}
	}
	return BlobEntry{}, false
}

// DataPath is where a snapshot file goes in a pulled directory or bundle.
func DataPath(id blob.ID) string { return "data/" + id.String() + ".parquet" }

// CasesPath is where a version's case table goes in a pulled directory or
// bundle: apart from data/, which holds only event files.
func CasesPath(id blob.ID) string { return "cases/" + id.String() + ".parquet" }

// State is where a version stands in curation. It is not part of the
// manifest: publishing or retracting a version does not change its bytes
// or its snapshot id.
type State string

// Version states.
const (
	StateDraft     State = "draft"     // visible to curators and the dataset's partners only
	StatePublished State = "published" // visible to every member of the project
	StateRetracted State = "retracted" // metadata and citation stay readable; downloads answer 410
)
