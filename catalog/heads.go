package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
)

// bucketHeads maps a version (seqKey) to its VersionHead, so that a
// selector resolves and a stored summary is served without decoding
// manifests, whose quality reports are large.
var bucketHeads = []byte("version_heads")

// VersionHead is what names a version and says whether it may be served:
// everything of a Version but its manifest, with the manifest's headline
// figures (mode, files, rows, quality scores) so that a list of versions
// needs no manifest and no full quality report.
type VersionHead struct {
	Dataset       string     `json:"dataset"`
	Number        int        `json:"version"`
	SnapshotID    string     `json:"snapshot_id"`
	CreatedAt     time.Time  `json:"created_at"`
	State         State      `json:"state"`
	PublishedAt   *time.Time `json:"published_at,omitempty"`
	RetractedAt   *time.Time `json:"retracted_at,omitempty"`
	RetractReason string     `json:"retract_reason,omitempty"`
	Mode          Mode       `json:"mode,omitempty"`
	Files         int        `json:"files"`
	Rows          int64      `json:"rows"`
	// Score is the version's quality score, Scores its dimensions'
	// (null when a dimension had nothing to measure).
	Score  *float64            `json:"score"`
	Scores map[string]*float64 `json:"scores,omitempty"`
	// Events are the lineage's event counts (new, already held, changed);
	// absent for versions made before events were counted.
	Events *EventCounts `json:"events,omitempty"`
}

// Head returns v's head.
func (v *Version) Head() VersionHead {
	h := VersionHead{
		Dataset: v.Manifest.Dataset, Number: v.Number, SnapshotID: v.SnapshotID, CreatedAt: v.Manifest.CreatedAt,
		State: v.State, PublishedAt: v.PublishedAt, RetractedAt: v.RetractedAt, RetractReason: v.RetractReason,
		Mode: v.Manifest.Lineage.Mode, Files: len(v.Manifest.Files), Rows: v.Manifest.Rows,
		Events: v.Manifest.Lineage.Events,
	}
	if q := v.Manifest.Quality; q != nil {
		h.Score = q.Score
		h.Scores = map[string]*float64{}
		for _, d := range q.Dimensions {
			h.Scores[d.Name] = d.Score
		}
	}
	return h
}

// headsFormat is the meta key of the heads' layout: heads of an older
// layout (without the headline figures) are rewritten at Open.
var headsFormat = []byte("heads_format")

const headsFormatVersion = "3"

// Visible reports whether a reader sees the version: curators (drafts
// true) see every version, members those that were ever published; a draft
// retracted before publication stays hidden from them.
func (h *VersionHead) Visible(drafts bool) bool { return drafts || h.PublishedAt != nil }

// CurrentAt reports whether the version was the published version in
// force at t: published at or before t and not yet retracted.
func (h *VersionHead) CurrentAt(t time.Time) bool {
	if h.PublishedAt == nil || h.PublishedAt.After(t) {
		return false
	}
	return h.RetractedAt == nil || h.RetractedAt.After(t)
}

// putVersion writes v and its head in tx.
func putVersion(tx *bolt.Tx, v *Version) error {
	k := seqKey(v.Manifest.Dataset, v.Number)
	if err := putJSON(tx.Bucket(bucketVersions), k, v); err != nil {
		return err
	}
	h := v.Head()
	return putJSON(tx.Bucket(bucketHeads), k, &h)
}

// backfillHeads writes the heads of versions stored before heads were,
// and rewrites every head once when the layout changed.
func backfillHeads(tx *bolt.Tx) error {
	heads := tx.Bucket(bucketHeads)
	meta := tx.Bucket(bucketMeta)
	rewrite := string(meta.Get(headsFormat)) != headsFormatVersion
	if rewrite {
		if err := meta.Put(headsFormat, []byte(headsFormatVersion)); err != nil {
			return err
		}
	}
	return tx.Bucket(bucketVersions).ForEach(func(k, data []byte) error {
		if !rewrite && heads.Get(k) != nil {
			return nil
		}
		var v Version
		if err := json.Unmarshal(data, &v); err != nil {
			return fmt.Errorf("catalog: version %q: %w", k, err)
		}
		if v.State == "" { // made before versions had states: published
			v.State = StatePublished
			at := v.Manifest.CreatedAt
			v.PublishedAt = &at
		}
		return putVersion(tx, &v)
	})
}

// MaxHeadsPage bounds the heads of one HeadsPage.
const MaxHeadsPage = 1000

// HeadsPage lists up to limit (at most MaxHeadsPage) heads of a dataset's
// versions numbered above after, in order, that a reader sees (drafts:
// see VersionHead.Visible). next is the number to pass as after for the
// following page, 0 when there is none. It reads no more heads than the
// page needs.
func (s *Store) HeadsPage(ctx context.Context, project, dataset string, after, limit int, drafts bool) (heads []VersionHead, next int, err error) {
	limit = min(max(limit, 1), MaxHeadsPage)
	ref := project + "/" + dataset
	prefix := []byte(ref + "/")
	heads = []VersionHead{}
	err = s.db.View(func(tx *bolt.Tx) error {
		if tx.Bucket(bucketDatasets).Get([]byte(ref)) == nil {
			return fmt.Errorf("dataset %q: %w", ref, ErrNotFound)
		}
		cur := tx.Bucket(bucketHeads).Cursor()
		for k, v := cur.Seek(seqKey(ref, max(after, 0)+1)); k != nil && bytes.HasPrefix(k, prefix); k, v = cur.Next() {
			var h VersionHead
			if err := json.Unmarshal(v, &h); err != nil {
				return fmt.Errorf("catalog: head %q: %w", k, err)
			}
			if !h.Visible(drafts) {
				continue
			}
			if len(heads) == limit {
				next = heads[len(heads)-1].Number
				return nil
			}
			heads = append(heads, h)
		}
		return nil
	})
	return heads, next, err
}

// ResolveHead is Resolve without reading the manifest.
func (s *Store) ResolveHead(ctx context.Context, project, dataset string, sel Selector, drafts bool) (*VersionHead, error) {
	ref := project + "/" + dataset
	var hs []VersionHead
	err := s.db.View(func(tx *bolt.Tx) error {
		if tx.Bucket(bucketDatasets).Get([]byte(ref)) == nil {
			return fmt.Errorf("dataset %q: %w", ref, ErrNotFound)
		}
		if sel.Kind == SelectNumber {
			var h VersionHead
			if err := getJSON(tx.Bucket(bucketHeads), seqKey(ref, sel.Number), &h, fmt.Sprintf("version %s@%d", ref, sel.Number)); err != nil {
				return err
			}
			hs = append(hs, h)
			return nil
		}
		var err error
		hs, err = scanJSON[VersionHead](tx.Bucket(bucketHeads), []byte(ref+"/"))
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
	var found *VersionHead
	for i := len(hs) - 1; i >= 0; i-- {
		h := &hs[i]
		switch sel.Kind {
		case SelectLatest:
			if h.State == StatePublished {
				return h, nil
			}
		case SelectTime:
			if h.CurrentAt(sel.At) {
				return h, nil
			}
		case SelectSnapshot:
			if !strings.HasPrefix(h.SnapshotID, sel.Prefix) || !h.Visible(drafts) {
				continue
			}
			if found != nil {
				return nil, fmt.Errorf("snapshot prefix %q matches versions %d and %d; give more digits: %w", sel.Prefix, h.Number, found.Number, ErrInvalid)
			}
			found = h
		}
	}
	if found != nil {
		return found, nil
	}
	switch sel.Kind {
	case SelectLatest:
		return nil, fmt.Errorf("dataset %s has no published version: %w", ref, ErrNotFound)
	case SelectTime:
		return nil, fmt.Errorf("dataset %s had no published version at %s: %w", ref, sel.At.Format(time.RFC3339), ErrNotFound)
	}
	return nil, fmt.Errorf("dataset %s has no version with snapshot id %s…: %w", ref, sel.Prefix, ErrNotFound)
}

// Resolve returns the version sel names. With drafts false (a member's
// view), only published and retracted versions can be named, and latest
// is the newest published one; with drafts true (curators), drafts can be
// named by number or snapshot too, but latest and instants still mean
// published versions, so every reader agrees on them. An unknown version
// fails with ErrNotFound, a prefix that matches two versions with
// ErrInvalid naming both.
func (s *Store) Resolve(ctx context.Context, project, dataset string, sel Selector, drafts bool) (*Version, error) {
	h, err := s.ResolveHead(ctx, project, dataset, sel, drafts)
	if err != nil {
		return nil, err
	}
	return s.Version(ctx, project, dataset, h.Number)
}

// Heads lists a dataset's version heads, oldest first.
func (s *Store) Heads(ctx context.Context, project, dataset string) ([]VersionHead, error) {
	return listOfDataset[VersionHead](s, bucketHeads, project, dataset)
}
