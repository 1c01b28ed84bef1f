package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// TestVersionSummaries checks that a version's stored summary, built by
// merging the parent's state with the new file's on append, equals one
// computed from all of the version's files; and that it follows
// replacements.
func TestVersionSummaries(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "lab", "flow", func(s *DatasetSpec) { s.Timezone = "America/Halifax" })
	var last *Version
	for i := range 3 {
		last = e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: uint64(10 + i), N: 800, CasePfx: string(rune('K' + i))}), "n.csv").Version
	}
	stored, err := e.s.Summary(ctx, "lab/flow", last.Number)
	if err != nil {
		t.Fatal(err)
	}
	// Forget the stored summaries of the version and of its files: Summary
	// then recomputes from the Parquet files.
	err = e.s.db.Update(func(tx *bolt.Tx) error {
		if err := tx.Bucket(bucketVersionSummaries).Delete(seqKey("lab/flow", last.Number)); err != nil {
			return err
		}
		if err := tx.Bucket(bucketVersionStates).Delete(seqKey("lab/flow", last.Number)); err != nil {
			return err
		}
		for _, f := range last.Manifest.Files {
			if err := tx.Bucket(bucketFileSummaries).Delete(f.SHA256[:]); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	fresh, err := e.s.Summary(ctx, "lab/flow", last.Number)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(stored, fresh) {
		t.Fatalf("merged summary differs from one computed from the files:\n%.400s\n%.400s", stored, fresh)
	}
	var sum struct {
		Events   uint64 `json:"events"`
		Timezone string `json:"timezone"`
	}
	if err := json.Unmarshal(stored, &sum); err != nil || sum.Events != 2400 || sum.Timezone != "America/Halifax" {
		t.Fatalf("summary: %+v %v", sum, err)
	}
	// A replacement: the summary counts the new version's rows.
	res, err := e.ingestOpt(t, "lab", "flow", csvBytes(header, nil), IngestOptions{
		Mode: ModeReplaceWindow, From: genBase, To: genBase.Add(48 * time.Hour), Sites: []string{"north"},
	})
	if err != nil {
		t.Fatal(err)
	}
	b, err := e.s.Summary(ctx, "lab/flow", res.Version.Number)
	if err != nil {
		t.Fatal(err)
	}
	if q := e.report(t, res.Version); q.Rows.Accepted != res.Version.Manifest.Rows || q.Rows.Total != 2400-res.Version.Manifest.Lineage.RowsRemoved {
		t.Errorf("after replace-window: quality rows %+v, version rows %d", q.Rows, res.Version.Manifest.Rows)
	}
	if err := json.Unmarshal(b, &sum); err != nil || int64(sum.Events) != res.Version.Manifest.Rows || res.Version.Manifest.Lineage.RowsRemoved == 0 {
		t.Fatalf("after replace-window: summary events %d, version rows %d (removed %d)", sum.Events, res.Version.Manifest.Rows, res.Version.Manifest.Lineage.RowsRemoved)
	}
}
