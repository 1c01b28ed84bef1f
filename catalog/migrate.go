package catalog

import (
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"log/slog"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// The stored format of a catalog, recorded in the meta bucket under
// "format". This file is the one place that reads older formats: Open
// migrates a catalog once, in the transaction that opens it, and every
// other function reads the current format only. Each format has a data
// directory written by it under testdata/golden/ that a test opens.
//
//	(none)  releases up to 8a7be85 (testdata/golden/release-8a7be85):
//	        "versions" held each version with its whole manifest, whose
//	        "quality" member embedded the report; "version_heads" repeated
//	        the version without it.
//	        Code of this layout after it (main up to a665667,
//	        testdata/golden/main-a665667) kept the same buckets, its
//	        manifests gaining "case_table" and lineage "events", and a
//	        "heads_format" meta key for "version_heads".
//	2       "versions" holds the version records, "manifests" each
//	        manifest's canonical bytes by snapshot id, "quality_reports"
//	        each version's report by its sha256
//	        (testdata/golden/format-2).
//	3       as 2, each version record holding its headline figures (mode,
//	        files, rows, dimension scores, event counts) for the list of
//	        versions; manifests may name a case table
//	        (testdata/golden/format-3).
const storeFormat = "3"

var bucketOldHeads = []byte("version_heads")

// migrate brings a catalog of an older format to storeFormat. A manifest
// is moved as the bytes stored at its commit, never re-encoded, so it
// keeps hashing to its snapshot id; the report it embeds is copied out,
// byte for byte, to the reports bucket, where the version record names it.
func migrate(tx *bolt.Tx, log *slog.Logger) error {
	meta := tx.Bucket(bucketMeta)
	switch f := string(meta.Get([]byte("format"))); f {
	case storeFormat:
		return nil
	case "":
		if err := migrateFrom1(tx, log); err != nil {
			return err
		}
		fallthrough
	case "2":
		if err := fillHeadlines(tx); err != nil {
			return err
		}
	default:
		return fmt.Errorf("catalog: stored format %q is newer than this program's (%s)", f, storeFormat)
	}
	if err := meta.Delete([]byte("heads_format")); err != nil {
		return err
	}
	if n := tx.Bucket(bucketVersions).Stats().KeyN; n > 0 {
		log.Info("catalog migrated", "format", storeFormat, "versions", n)
	}
	return meta.Put([]byte("format"), []byte(storeFormat))
}

// migrateFrom1 moves the manifests and reports of the first layout out of
// the version records.
func migrateFrom1(tx *bolt.Tx, log *slog.Logger) error {
	vb := tx.Bucket(bucketVersions)
	type oldVersion struct {
		Number        int             `json:"version"`
		SnapshotID    SnapshotID      `json:"snapshot_id"`
		Manifest      json.RawMessage `json:"manifest"`
		State         State           `json:"state"`
		PublishedAt   *time.Time      `json:"published_at"`
		PublishedBy   string          `json:"published_by"`
		RetractedAt   *time.Time      `json:"retracted_at"`
		RetractedBy   string          `json:"retracted_by"`
		RetractReason string          `json:"retract_reason"`
	}
	type oldManifest struct {
		Dataset   DatasetRef      `json:"dataset"`
		CreatedAt time.Time       `json:"created_at"`
		Quality   json.RawMessage `json:"quality"`
	}
	var moved []*Version
	err := vb.ForEach(func(k, data []byte) error {
		var o oldVersion
		if err := json.Unmarshal(data, &o); err != nil {
			return fmt.Errorf("catalog: migrate version %q: %w", k, err)
		}
		var m oldManifest
		if err := json.Unmarshal(o.Manifest, &m); err != nil {
			return fmt.Errorf("catalog: migrate version %q: manifest: %w", k, err)
		}
		if got := SnapshotOf(o.Manifest); got != o.SnapshotID {
			// An earlier release re-encoded this record (publishing did):
			// the bytes are kept as found, and pull and verify will say
			// that they do not hash to the snapshot id.
			log.Error("stored manifest does not hash to its snapshot id; kept as found", "dataset", m.Dataset, "version", o.Number, "snapshot_id", o.SnapshotID, "sha256", got)
		}
		if err := putOnce(tx.Bucket(bucketManifests), "manifest", o.SnapshotID.String(), o.Manifest); err != nil {
			return err
		}
		v := &Version{Dataset: m.Dataset, Number: o.Number, SnapshotID: o.SnapshotID, CreatedAt: m.CreatedAt,
			State: o.State, PublishedAt: o.PublishedAt, PublishedBy: o.PublishedBy,
			RetractedAt: o.RetractedAt, RetractedBy: o.RetractedBy, RetractReason: o.RetractReason}
		if v.State == "" { // made before versions had states: published
			v.State = StatePublished
			at := m.CreatedAt
			v.PublishedAt = &at
		}
		if len(m.Quality) > 0 && string(m.Quality) != "null" {
			var sc struct {
				Score *float64 `json:"score"`
			}
			if err := json.Unmarshal(m.Quality, &sc); err != nil {
				return fmt.Errorf("catalog: migrate version %q: quality: %w", k, err)
			}
			v.Quality = ReportRef{SHA256: blob.ID(sha256.Sum256(m.Quality)), Bytes: int64(len(m.Quality)), Score: sc.Score}
			if err := putOnce(tx.Bucket(bucketReports), "quality report", v.Quality.SHA256.String(), m.Quality); err != nil {
				return err
			}
		}
		moved = append(moved, v)
		return nil
	})
	if err != nil {
		return err
	}
	for _, v := range moved { // rewritten after the walk: bbolt forbids puts inside ForEach
		if err := putVersion(tx, v); err != nil {
			return err
		}
	}
	if tx.Bucket(bucketOldHeads) != nil {
		if err := tx.DeleteBucket(bucketOldHeads); err != nil {
			return err
		}
	}
	return nil
}

// fillHeadlines gives every version record the headline figures of its
// stored manifest and report (Version.setHeadline), reading them as
// stored; nothing but the records is rewritten.
func fillHeadlines(tx *bolt.Tx) error {
	vb := tx.Bucket(bucketVersions)
	var filled []*Version
	err := vb.ForEach(func(k, data []byte) error {
		v := &Version{}
		if err := json.Unmarshal(data, v); err != nil {
			return fmt.Errorf("catalog: migrate version %q: %w", k, err)
		}
		if err := withManifest(tx, v, nil); err != nil {
			return err
		}
		v.setHeadline(v.Manifest)
		if !v.Quality.SHA256.IsZero() {
			rb, err := getReport(tx, v.Quality.SHA256)
			if err != nil {
				return fmt.Errorf("catalog: migrate version %q: %w", k, err)
			}
			var r struct {
				Dimensions []struct {
					Name  string   `json:"name"`
					Score *float64 `json:"score"`
				} `json:"dimensions"`
			}
			if err := json.Unmarshal(rb, &r); err != nil {
				return fmt.Errorf("catalog: migrate version %q: quality report: %w", k, err)
			}
			v.Scores = map[string]*float64{}
			for _, d := range r.Dimensions {
				v.Scores[d.Name] = d.Score
			}
		}
		filled = append(filled, v)
		return nil
	})
	if err != nil {
		return err
	}
	for _, v := range filled { // after the walk: bbolt forbids puts inside ForEach
		if err := putVersion(tx, v); err != nil {
			return err
		}
	}
	return nil
}
