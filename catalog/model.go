package catalog

import (
	"crypto/sha256"
	"encoding/hex"
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
}

// Dataset is one stream of uploads from partner sites through one mapping
// profile. Its versions are numbered from 1.
type Dataset struct {
	Project     string     `json:"project"`
	Name        string     `json:"name"`
	Title       string     `json:"title,omitempty"`
	Profile     string     `json:"profile"`      // the mapping profile, YAML as given
	ProfileHash string     `json:"profile_hash"` // schema.Profile.Hash of the effective profile
	Timezone    string     `json:"timezone"`     // IANA zone for wall-clock times
	RejectAbove float64    `json:"reject_above"` // an upload with a larger share of invalid rows is rejected whole
	WindowFrom  *time.Time `json:"window_from,omitempty"`
	WindowTo    *time.Time `json:"window_to,omitempty"`
	CreatedAt   time.Time  `json:"created_at"`
	CreatedBy   string     `json:"created_by"`
	Latest      int        `json:"latest_version"` // 0 before the first accepted upload
	Uploads     int        `json:"uploads"`        // uploads received, accepted or not
}

// Ref returns "project/dataset".
func (d *Dataset) Ref() string { return d.Project + "/" + d.Name }

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
	ID         string          `json:"id"`
	Seq        int             `json:"seq"`
	Dataset    string          `json:"dataset"`
	Filename   string          `json:"filename,omitempty"`
	Bytes      int64           `json:"bytes"`
	SHA256     string          `json:"sha256,omitempty"` // of the bytes as sent
	Status     UploadStatus    `json:"status"`
	Version    int             `json:"version,omitempty"`
	Error      *UploadError    `json:"error,omitempty"`
	Report     *quality.Report `json:"report,omitempty"`
	Unmapped   []string        `json:"unmapped_columns,omitempty"`
	ReceivedAt time.Time       `json:"received_at"`
	By         string          `json:"by"`
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
	SHA256   blob.ID   `json:"sha256"`
	Bytes    int64     `json:"bytes"`
	Rows     int64     `json:"rows"`
	Upload   string    `json:"upload"`
	MinTime  time.Time `json:"min_occurred_at"`
	MaxTime  time.Time `json:"max_occurred_at"`
	RowGroup int64     `json:"row_group_rows"`
}

// Manifest describes a version completely: its files and how they came to
// be. Its canonical JSON (Canonical) hashes to the version's snapshot id.
type Manifest struct {
	Dataset       string          `json:"dataset"`
	Version       int             `json:"version"`
	Parent        int             `json:"parent,omitempty"`
	SchemaVersion string          `json:"schema_version"`
	ProfileHash   string          `json:"profile_hash"`
	KeyID         string          `json:"pseudonym_key_id"`
	Files         []FileEntry     `json:"files"`
	Rows          int64           `json:"rows"`
	Uploads       []string        `json:"uploads"`
	Quality       *quality.Report `json:"quality"`
	CreatedBy     string          `json:"created_by"`
	CreatedAt     time.Time       `json:"created_at"`
}

// Canonical returns the manifest's canonical JSON: encoding/json of the
// struct (fixed field order, sorted map keys, times in RFC 3339 UTC), no
// indentation, no trailing newline.
func (m *Manifest) Canonical() ([]byte, error) {
	c := *m
	c.CreatedAt = c.CreatedAt.UTC()
	b, err := json.Marshal(&c)
	if err != nil {
		return nil, fmt.Errorf("manifest: %w", err)
	}
	return b, nil
}

// Version is one immutable state of a dataset.
type Version struct {
	Number     int      `json:"version"`
	SnapshotID string   `json:"snapshot_id"` // hex SHA-256 of the manifest's canonical JSON
	Manifest   Manifest `json:"manifest"`
}

func newVersion(m Manifest) (*Version, error) {
	b, err := m.Canonical()
	if err != nil {
		return nil, err
	}
	sum := sha256.Sum256(b)
	return &Version{Number: m.Version, SnapshotID: hex.EncodeToString(sum[:]), Manifest: m}, nil
}

// File returns the manifest entry for id.
func (v *Version) File(id blob.ID) (FileEntry, bool) {
	for _, f := range v.Manifest.Files {
		if f.SHA256 == id {
			return f, true
		}
	}
	return FileEntry{}, false
}
