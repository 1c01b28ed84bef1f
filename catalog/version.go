package catalog

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/quality"
)

// Buckets of versions: the version records (small, keyed by seqKey), the
// manifests' canonical bytes (keyed by snapshot id, hex) and the
// versions' quality reports (keyed by their sha256, hex). Manifests and
// reports are written once and never rewritten.
var (
	bucketManifests = []byte("manifests")
	bucketReports   = []byte("quality_reports")
)

// Version is one immutable state of a dataset: its name, its snapshot id,
// its quality report's reference and where it stands in curation. The
// manifest is stored apart, as its canonical bytes; Store.Version and
// Store.Versions decode it into Manifest for use.
type Version struct {
	Dataset    DatasetRef `json:"dataset"`
	Number     int        `json:"version"`
	SnapshotID SnapshotID `json:"snapshot_id"` // SHA-256 of the manifest's stored bytes
	CreatedAt  time.Time  `json:"created_at"`
	Quality    ReportRef  `json:"quality"`

	State         State      `json:"state"`
	PublishedAt   *time.Time `json:"published_at,omitempty"`
	PublishedBy   string     `json:"published_by,omitempty"`
	RetractedAt   *time.Time `json:"retracted_at,omitempty"`
	RetractedBy   string     `json:"retracted_by,omitempty"`
	RetractReason string     `json:"retract_reason,omitempty"`
	// RiskOverride records a publication above the project's disclosure
	// risk threshold (attributes.go).
	RiskOverride *RiskOverride `json:"risk_override,omitempty"`

	// The version's headline figures, copied from its manifest and report
	// at commit (and by migrate for older records), so that a list of
	// versions decodes no manifest and no report: the lineage's mode, the
	// event files, the rows, each quality dimension's score (null when a
	// dimension had nothing to measure; the overall score is Quality.Score)
	// and the lineage's event counts (absent for versions made before
	// events were counted).
	Mode   Mode                `json:"mode,omitempty"`
	Files  int                 `json:"files"`
	Rows   int64               `json:"rows"`
	Scores map[string]*float64 `json:"scores,omitempty"`
	Events *EventCounts        `json:"events,omitempty"`

	// Manifest is the stored manifest, decoded; nil where only the version
	// record was read (ResolveVersion, Heads). It is not stored with the
	// record.
	Manifest *Manifest `json:"manifest,omitempty"`

	// carryCase, set on a version carried to a newer key generation for
	// the next commit (rekey.go), re-keys a case id read from its files.
	carryCase func(string) (string, error)
}

// File returns the manifest entry for id; v must have its manifest.
func (v *Version) File(id blob.ID) (FileEntry, bool) {
	if v.Manifest == nil {
		return FileEntry{}, false
	}
	for _, f := range v.Manifest.Files {
		if f.SHA256 == id {
			return f, true
		}
	}
	return FileEntry{}, false
}

// Visible reports whether a reader sees the version: curators (drafts
// true) see every version, members those that were ever published; a draft
// retracted before publication stays hidden from them.
func (v *Version) Visible(drafts bool) bool { return drafts || v.PublishedAt != nil }

// CurrentAt reports whether the version was the published version in
// force at t: published at or before t and not yet retracted.
func (v *Version) CurrentAt(t time.Time) bool {
	if v.PublishedAt == nil || v.PublishedAt.After(t) {
		return false
	}
	return v.RetractedAt == nil || v.RetractedAt.After(t)
}

// putVersion writes v's record (without its manifest) in tx.
func putVersion(tx *bolt.Tx, v *Version) error {
	rec := *v
	rec.Manifest = nil
	return putJSON(tx.Bucket(bucketVersions), seqKey(v.Dataset.String(), v.Number), &rec)
}

// sealReport encodes the version's quality report, before the
// transaction, and references it from m by its sha256.
func sealReport(m *Manifest, rep *quality.Report) ([]byte, error) {
	if rep == nil {
		return nil, nil
	}
	rb, err := json.Marshal(rep)
	if err != nil {
		return nil, fmt.Errorf("quality report: %w", err)
	}
	m.Quality = &ReportRef{SHA256: blob.ID(sha256.Sum256(rb)), Bytes: int64(len(rb)), Score: rep.Score}
	return rb, nil
}

// commitManifest stores the version's quality report (rb, from
// sealReport) and the manifest's canonical bytes, once, in tx, and
// returns the version they make, in no state yet. These bytes are the
// manifest from now on: nothing re-encodes it.
func commitManifest(tx *bolt.Tx, m *Manifest, rep *quality.Report, rb []byte) (*Version, error) {
	if rep != nil {
		if err := putOnce(tx.Bucket(bucketReports), "quality report", m.Quality.SHA256.String(), rb); err != nil {
			return nil, err
		}
	}
	b, err := m.canonical()
	if err != nil {
		return nil, err
	}
	v := &Version{Dataset: m.Dataset, Number: m.Version, SnapshotID: SnapshotOf(b), CreatedAt: m.CreatedAt.UTC(), Manifest: m}
	if m.Quality != nil {
		v.Quality = *m.Quality
	}
	v.setHeadline(m)
	if rep != nil {
		v.Scores = map[string]*float64{}
		for _, d := range rep.Dimensions {
			v.Scores[d.Name] = d.Score
		}
	}
	if err := putOnce(tx.Bucket(bucketManifests), "manifest", v.SnapshotID.String(), b); err != nil {
		return nil, err
	}
	return v, nil
}

// setHeadline copies m's headline figures into v (all but the dimension
// scores, which come from the report).
func (v *Version) setHeadline(m *Manifest) {
	v.Mode, v.Files, v.Rows, v.Events = m.Lineage.Mode, len(m.Files), m.Rows, m.Lineage.Events
}

// MaxVersionsPage bounds the versions of one VersionsPage.
const MaxVersionsPage = 1000

// VersionsPage lists up to limit (at most MaxVersionsPage) records of a
// dataset's versions numbered above after, in order, that a reader sees
// (drafts: see Version.Visible), without their manifests. next is the
// number to pass as after for the following page, 0 when there is none.
// It reads no more records than the page needs.
func (s *Store) VersionsPage(ctx context.Context, project, dataset string, after, limit int, drafts bool) (vs []Version, next int, err error) {
	limit = min(max(limit, 1), MaxVersionsPage)
	ref := project + "/" + dataset
	prefix := []byte(ref + "/")
	vs = []Version{}
	err = s.db.View(func(tx *bolt.Tx) error {
		if tx.Bucket(bucketDatasets).Get([]byte(ref)) == nil {
			return fmt.Errorf("dataset %q: %w", ref, ErrNotFound)
		}
		cur := tx.Bucket(bucketVersions).Cursor()
		for k, data := cur.Seek(seqKey(ref, max(after, 0)+1)); k != nil && bytes.HasPrefix(k, prefix); k, data = cur.Next() {
			var v Version
			if err := json.Unmarshal(data, &v); err != nil {
				return fmt.Errorf("catalog: version %q: %w", k, err)
			}
			if !v.Visible(drafts) {
				continue
			}
			if len(vs) == limit {
				next = vs[len(vs)-1].Number
				return nil
			}
			vs = append(vs, v)
		}
		return nil
	})
	return vs, next, err
}

// putOnce stores data under key unless the key holds it already; other
// bytes under the same key are an error, never overwritten.
func putOnce(b *bolt.Bucket, what, key string, data []byte) error {
	if have := b.Get([]byte(key)); have != nil {
		if string(have) != string(data) {
			return fmt.Errorf("catalog: %s %s is stored with other bytes", what, key)
		}
		return nil
	}
	return b.Put([]byte(key), data)
}

// withManifest decodes v's stored manifest into v.Manifest.
func (s *Store) withManifest(tx *bolt.Tx, v *Version) error { return withManifest(tx, v, s.manifests) }

// withManifest decodes v's stored manifest into v.Manifest, through memo
// unless it is nil.
func withManifest(tx *bolt.Tx, v *Version, memo *decodedMemo[Manifest]) error {
	key := []byte(v.SnapshotID.String())
	b := tx.Bucket(bucketManifests).Get(key)
	if b == nil {
		return fmt.Errorf("catalog: version %s@%d: manifest %s is missing", v.Dataset, v.Number, v.SnapshotID)
	}
	m, err := memo.decode(key, b)
	if err != nil {
		return fmt.Errorf("catalog: version %s@%d: manifest: %w", v.Dataset, v.Number, err)
	}
	v.Manifest = &m
	return nil
}

// ManifestBytes returns v's manifest as stored at commit: the bytes whose
// SHA-256 is v's snapshot id.
func (s *Store) ManifestBytes(ctx context.Context, v *Version) ([]byte, error) {
	var out []byte
	err := s.db.View(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketManifests).Get([]byte(v.SnapshotID.String()))
		if b == nil {
			return fmt.Errorf("manifest %s: %w", v.SnapshotID, ErrNotFound)
		}
		out = append([]byte(nil), b...)
		return nil
	})
	return out, err
}

// QualityReport returns v's quality report as stored: JSON whose SHA-256 is
// v.Quality.SHA256.
func (s *Store) QualityReport(ctx context.Context, v *Version) ([]byte, error) {
	var out []byte
	err := s.db.View(func(tx *bolt.Tx) (err error) {
		out, err = getReport(tx, v.Quality.SHA256)
		return err
	})
	return out, err
}

func getReport(tx *bolt.Tx, id blob.ID) ([]byte, error) {
	b := tx.Bucket(bucketReports).Get([]byte(id.String()))
	if b == nil {
		return nil, fmt.Errorf("quality report %s: %w", id, ErrNotFound)
	}
	return append([]byte(nil), b...), nil
}

// Report returns v's quality report, decoded.
func (s *Store) Report(ctx context.Context, v *Version) (*quality.Report, error) {
	b, err := s.QualityReport(ctx, v)
	if err != nil {
		return nil, err
	}
	var r quality.Report
	if err := json.Unmarshal(b, &r); err != nil {
		return nil, fmt.Errorf("catalog: quality report of %s@%d: %w", v.Dataset, v.Number, err)
	}
	return &r, nil
}

// ResolveVersion is Resolve without reading the manifest. What latest and
// a number name is kept until the next write (readMemo): every request
// for a version's summary or files asks.
func (s *Store) ResolveVersion(ctx context.Context, project, dataset string, sel Selector, drafts bool) (*Version, error) {
	if sel.Kind != SelectLatest && sel.Kind != SelectNumber {
		return s.resolveVersion(project, dataset, sel, drafts)
	}
	at, k := s.db.readAt(), resolveKey{ref: project + "/" + dataset, kind: sel.Kind, number: sel.Number, drafts: drafts}
	if v, ok := s.resolved.get(at, k); ok {
		c := v.clone()
		return &c, nil
	}
	v, err := s.resolveVersion(project, dataset, sel, drafts)
	if err == nil {
		s.resolved.put(at, k, v.clone())
	}
	return v, err
}

// resolveKey names an answer of ResolveVersion.
type resolveKey struct {
	ref    string
	kind   SelectorKind
	number int
	drafts bool
}

// versionKey names a version.
type versionKey struct {
	ref    string
	number int
}

func (s *Store) resolveVersion(project, dataset string, sel Selector, drafts bool) (*Version, error) {
	ref := project + "/" + dataset
	var hs []Version
	err := s.db.View(func(tx *bolt.Tx) error {
		if tx.Bucket(bucketDatasets).Get([]byte(ref)) == nil {
			return fmt.Errorf("dataset %q: %w", ref, ErrNotFound)
		}
		if sel.Kind == SelectNumber {
			h, err := s.versions.get(tx.Bucket(bucketVersions), seqKey(ref, sel.Number), fmt.Sprintf("version %s@%d", ref, sel.Number))
			if err != nil {
				return err
			}
			hs = append(hs, h)
			return nil
		}
		if sel.Kind == SelectLatest || sel.Kind == SelectTime {
			// The newest match wins: walk back from the newest record and
			// stop there, so a request costs one record, not the history.
			return s.newestFirst(tx.Bucket(bucketVersions), ref, func(h *Version) bool {
				if (sel.Kind == SelectLatest && h.State == StatePublished) || (sel.Kind == SelectTime && h.CurrentAt(sel.At)) {
					hs = append(hs, *h)
					return true
				}
				return false
			})
		}
		var err error
		hs, err = scanJSON[Version](tx.Bucket(bucketVersions), []byte(ref+"/"))
		return err
	})
	if err != nil {
		return nil, err
	}
	if sel.Kind == SelectNumber {
		if !hs[0].Visible(drafts) {
			return nil, fmt.Errorf("version %s@%d: %w", ref, sel.Number, ErrNotFound)
		}
		return &hs[0], nil
	}
	switch {
	case sel.Kind == SelectLatest && len(hs) == 0:
		return nil, fmt.Errorf("dataset %s has no published version: %w", ref, ErrNotFound)
	case sel.Kind == SelectTime && len(hs) == 0:
		return nil, fmt.Errorf("dataset %s had no published version at %s: %w", ref, sel.At.Format(time.RFC3339), ErrNotFound)
	case sel.Kind == SelectLatest || sel.Kind == SelectTime:
		return &hs[0], nil
	}
	// A snapshot prefix: every record, so that a prefix two versions share
	// is refused.
	var found *Version
	for i := len(hs) - 1; i >= 0; i-- {
		h := &hs[i]
		if !strings.HasPrefix(h.SnapshotID.String(), sel.Prefix) || !h.Visible(drafts) {
			continue
		}
		if found != nil {
			return nil, fmt.Errorf("snapshot prefix %q matches versions %d and %d; give more digits: %w", sel.Prefix, h.Number, found.Number, ErrInvalid)
		}
		found = h
	}
	if found != nil {
		return found, nil
	}
	return nil, fmt.Errorf("dataset %s has no version with snapshot id %s…: %w", ref, sel.Prefix, ErrNotFound)
}

// Resolve returns the version sel names, with its manifest. With drafts
// false (a member's view), only published and retracted versions can be
// named, and latest is the newest published one; with drafts true
// (curators), drafts can be named by number or snapshot too, but latest
// and instants still mean published versions, so every reader agrees on
// them. An unknown version fails with ErrNotFound, a prefix that matches
// two versions with ErrInvalid naming both.
func (s *Store) Resolve(ctx context.Context, project, dataset string, sel Selector, drafts bool) (*Version, error) {
	h, err := s.ResolveVersion(ctx, project, dataset, sel, drafts)
	if err != nil {
		return nil, err
	}
	return s.Version(ctx, project, dataset, h.Number)
}

// Heads lists a dataset's versions, oldest first, without their manifests.
func (s *Store) Heads(ctx context.Context, project, dataset string) ([]Version, error) {
	return listOfDataset[Version](s, bucketVersions, project, dataset)
}

// Versions lists a dataset's versions with their manifests, oldest first.
func (s *Store) Versions(ctx context.Context, project, dataset string) ([]Version, error) {
	vs, err := s.Heads(ctx, project, dataset)
	if err != nil {
		return nil, err
	}
	err = s.db.View(func(tx *bolt.Tx) error {
		for i := range vs {
			if err := s.withManifest(tx, &vs[i]); err != nil {
				return err
			}
		}
		return nil
	})
	return vs, err
}

// Version returns version n of a dataset with its manifest; n == 0 means
// the latest.
func (s *Store) Version(ctx context.Context, project, dataset string, n int) (*Version, error) {
	// A numbered version is kept with its manifest until the next write
	// (readMemo): every download asks.
	at, k := s.db.readAt(), versionKey{ref: project + "/" + dataset, number: n}
	if n > 0 {
		if v, ok := s.numbered.get(at, k); ok {
			return v.withManifestClone(), nil
		}
	}
	var v Version
	err := s.db.View(func(tx *bolt.Tx) error {
		ref := project + "/" + dataset
		if n == 0 {
			var d Dataset
			if err := getJSON(tx.Bucket(bucketDatasets), []byte(ref), &d, "dataset "+ref); err != nil {
				return err
			}
			if d.Latest == 0 {
				return fmt.Errorf("dataset %q has no version yet: %w", ref, ErrNotFound)
			}
			n = d.Latest
		}
		var err error
		if v, err = s.versions.get(tx.Bucket(bucketVersions), seqKey(ref, n), fmt.Sprintf("version %s@%d", ref, n)); err != nil {
			return err
		}
		return s.withManifest(tx, &v)
	})
	if err != nil {
		return nil, err
	}
	if n > 0 {
		s.numbered.put(at, k, *v.withManifestClone())
	}
	return &v, nil
}

// newestFirst decodes the version records of dataset ref from the newest
// back (seqKey orders them by number) and stops when fn returns true.
func (s *Store) newestFirst(b *bolt.Bucket, ref string, fn func(*Version) bool) error {
	prefix := []byte(ref + "/")
	c := b.Cursor()
	k, _ := c.Seek(append([]byte(ref), '/'+1)) // just past the last key under prefix
	var v []byte
	if k == nil {
		k, v = c.Last()
	} else {
		k, v = c.Prev()
	}
	for ; k != nil && bytes.HasPrefix(k, prefix); k, v = c.Prev() {
		h, err := s.versions.decode(k, v)
		if err != nil {
			return err
		}
		if fn(&h) {
			return nil
		}
	}
	return nil
}
