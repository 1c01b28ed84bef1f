package catalog

// Edge cases of upload modes, digests, rewrites, holds and collection,
// found in review.

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/schema"
)

func mkRows(site, pfx string, day int, n int) []row {
	var out []row
	for i := 0; i < n; i++ {
		at := genBase.Add(time.Duration(day)*24*time.Hour + time.Duration(i)*time.Minute)
		out = append(out, row{site, fmt.Sprintf("%s%d", pfx, i/3), "", "R-1", []string{"arrival", "start", "complete"}[i%3], "", "q1", at.Format(time.RFC3339Nano), "1", "", "", fmt.Sprintf("%s-ev%d", pfx, i)})
	}
	return out
}

func summaryOfVersion(t *testing.T, e *env, ds *Dataset, v *Version) []byte {
	acc := summary.New(summaryOptions(ds))
	var all []schema.Event
	for _, f := range v.Manifest.Files {
		all = append(all, readEvents(t, e.blobBytes(t, f.SHA256))...)
	}
	slices.SortStableFunc(all, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	acc.ObserveAll(all)
	// The stored summary counts cases, subjects and resources exactly.
	s := acc.Summary()
	s.Cases.Value, s.Subjects.Value, s.Resources.Value = float64(distinctOf(all, func(e *schema.Event) string { return e.CaseID })),
		float64(distinctOf(all, func(e *schema.Event) string { return e.SubjectID })), float64(distinctOf(all, func(e *schema.Event) string { return e.ResourceID }))
	s.Cases.Exact, s.Subjects.Exact, s.Resources.Exact = true, true, true
	s.Cases.RelStdError, s.Subjects.RelStdError, s.Resources.RelStdError = 0, 0, 0
	b, _ := json.Marshal(s)
	return b
}

// R1: digest recorded for a duplicate aliases the wrong version.
func TestEdgeDigestAlias(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	A := csvBytes(header, mkRows("north", "A", 0, 30))
	B := gzipBytes(A) // other bytes, same events, same Parquet file
	C := csvBytes(header, mkRows("south", "C", 3, 30))
	e.ingest(t, "p", "d", A, "a.csv")
	e.ingest(t, "p", "d", C, "c.csv")
	rb := e.ingest(t, "p", "d", B, "b.csv.gz")
	t.Logf("B first: %s v%d", rb.Upload.Status, rb.Upload.Version)
	// remove A's events (north, day 0) only
	r3, err := e.ingestOpt(t, "p", "d", nil, IngestOptions{Mode: ModeReplaceWindow, From: genBase, To: genBase.Add(24 * time.Hour), Sites: []string{"north"}})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("removal: v%d rows %d", r3.Version.Number, r3.Version.Manifest.Rows)
	rb2 := e.ingest(t, "p", "d", B, "b.csv.gz")
	ra2 := e.ingest(t, "p", "d", A, "a.csv")
	t.Logf("B again: %s v%d ; A again: %s v%d rows %d", rb2.Upload.Status, rb2.Upload.Version, ra2.Upload.Status, ra2.Version.Number, ra2.Version.Manifest.Rows)
	latest, _ := e.s.Version(context.Background(), "p", "d", 0)
	if rb2.Upload.Status != UploadAccepted || ra2.Upload.Status != UploadDuplicate || latest.Manifest.Rows != 60 {
		t.Errorf("after A's events were removed: B (gzip of A) %s v%d, then A %s, latest %d rows; want B accepted and A a duplicate, 60 rows", rb2.Upload.Status, rb2.Upload.Version, ra2.Upload.Status, latest.Manifest.Rows)
	}
}

// R2: stored summaries / quality match a recomputation, across modes.
func TestEdgeSummaryConsistency(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RowGroupRows = 50 })
	ds := e.dataset(t, "p", "d", nil)
	ctx := context.Background()
	var steps []*IngestResult
	steps = append(steps, e.ingest(t, "p", "d", csvBytes(header, append(mkRows("north", "A", 0, 60), mkRows("south", "S", 0, 60)...)), "a.csv"))
	steps = append(steps, e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "B", 1, 60)), "b.csv"))
	// window cutting file a in the middle (first 30 minutes of day 0, north)
	r, err := e.ingestOpt(t, "p", "d", csvBytes(header, mkRows("north", "W", 0, 10)), IngestOptions{Mode: ModeReplaceWindow, From: genBase, To: genBase.Add(30 * time.Minute)})
	if err != nil {
		t.Fatal(err)
	}
	steps = append(steps, r)
	r, err = e.ingestOpt(t, "p", "d", nil, IngestOptions{Mode: ModeReplaceWindow, From: genBase, To: genBase.Add(10 * 24 * time.Hour), Sites: []string{"north", "south"}})
	if err != nil {
		t.Fatal(err)
	}
	steps = append(steps, r)
	t.Logf("removal of everything: v%d files=%d rows=%d", r.Version.Number, len(r.Version.Manifest.Files), r.Version.Manifest.Rows)
	steps = append(steps, e.ingest(t, "p", "d", csvBytes(header, mkRows("east", "E", 2, 30)), "e.csv"))
	for _, st := range steps {
		v := st.Version
		got, err := e.s.Summary(ctx, "p/d", v.Number)
		if err != nil {
			t.Fatal(err)
		}
		want := summaryOfVersion(t, e, ds, v)
		var g, w map[string]any
		json.Unmarshal(got, &g)
		json.Unmarshal(want, &w)
		gb, _ := json.Marshal(g)
		wb, _ := json.Marshal(w)
		if !bytes.Equal(gb, wb) {
			t.Errorf("v%d (%s): stored summary differs from recomputation\n got %s\nwant %s", v.Number, v.Manifest.Lineage.Mode, gb, wb)
		}
		q := e.report(t, v)
		if q.Rows.Accepted != v.Manifest.Rows {
			t.Errorf("v%d (%s): quality accepted rows %d, manifest rows %d", v.Number, v.Manifest.Lineage.Mode, q.Rows.Accepted, v.Manifest.Rows)
		}
	}
}

// R4: retracted draft becomes visible to members.
func TestEdgeRetractedDraft(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Drafts = true })
	e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "A", 0, 30)), "a.csv")
	ctx := context.Background()
	if _, err := e.s.ResolveVersion(ctx, "p", "d", Selector{Kind: SelectNumber, Number: 1}, false); err == nil {
		t.Fatal("draft visible")
	}
	if _, err := e.s.Retract(ctx, "p", "d", 1, "oops", "cur"); err != nil {
		t.Fatal(err)
	}
	if h, err := e.s.ResolveVersion(ctx, "p", "d", Selector{Kind: SelectNumber, Number: 1}, false); err == nil {
		t.Errorf("a retracted draft (never published) is visible to members: %+v", h.State)
	}
}

// R5: GC in a loop while replace-window uploads rewrite files.
func TestEdgeGCStress(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RowGroupRows = 20 })
	e.dataset(t, "p", "d", nil)
	ctx := context.Background()
	e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "A", 0, 300)), "a.csv")
	stop := make(chan struct{})
	var wg sync.WaitGroup
	wg.Go(func() {
		for {
			select {
			case <-stop:
				return
			default:
			}
			if _, err := e.s.CollectGarbage(ctx, GCOptions{Grace: -1}, "admin"); err != nil {
				t.Error(err)
			}
		}
	})
	for i := 0; i < 20; i++ {
		from := genBase.Add(time.Duration(i*10) * time.Minute)
		_, err := e.ingestOpt(t, "p", "d", csvBytes(header, mkRows("north", fmt.Sprintf("W%d-", i), 0, 0)), IngestOptions{Mode: ModeReplaceWindow, From: from, To: from.Add(5 * time.Minute), Sites: []string{"north"}})
		if err != nil {
			t.Fatal(err)
		}
	}
	close(stop)
	wg.Wait()
	vs, _ := e.s.Versions(ctx, "p", "d")
	for _, v := range vs {
		for _, f := range v.Manifest.Files {
			e.blobBytes(t, f.SHA256)
		}
	}
	t.Logf("%d versions ok", len(vs))
}

// R6: a failed replace-window plan leaks holds.
func TestEdgeHoldLeak(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	ctx := context.Background()
	e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "A", 0, 30)), "a.csv")
	r2 := e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "B", 0, 30)[5:]), "b.csv")
	second := r2.Version.Manifest.Files[1].SHA256
	if err := e.blobs.Delete(ctx, second); err != nil {
		t.Fatal(err)
	}
	_, err := e.ingestOpt(t, "p", "d", csvBytes(header, mkRows("north", "W", 0, 3)), IngestOptions{Mode: ModeReplaceWindow, From: genBase, To: genBase.Add(10 * time.Minute)})
	t.Logf("replace-window with a missing file: %v", err)
	e.s.mu.Lock()
	n := len(e.s.pending)
	e.s.mu.Unlock()
	if n != 0 {
		t.Errorf("%d blob holds leaked after the failed plan; GC will spare them forever", n)
	}
}

// R7: appending X+Y after X stores Y only (X is held), so a replace-window
// over Y's day removes Y's file and leaves X's as it is: no rewrite, no two
// files with the same events.
func TestEdgeRewriteCollides(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	X := mkRows("north", "X", 1, 30)
	Y := mkRows("north", "Y", 2, 30)
	e.ingest(t, "p", "d", csvBytes(header, X), "x.csv")
	xy := e.ingest(t, "p", "d", csvBytes(header, append(append([]row{}, X...), Y...)), "xy.csv")
	if ev := xy.Upload.Events; ev == nil || ev.New != 30 || ev.Held != 30 || xy.Version.Manifest.Rows != 60 {
		t.Fatalf("X+Y after X: %+v, %d rows", ev, xy.Version.Manifest.Rows)
	}
	r, err := e.ingestOpt(t, "p", "d", nil, IngestOptions{Mode: ModeReplaceWindow, From: genBase.Add(48 * time.Hour), To: genBase.Add(72 * time.Hour), Sites: []string{"north"}})
	if err != nil {
		t.Fatal(err)
	}
	fs := r.Version.Manifest.Files
	if len(fs) != 1 || fs[0].DerivedFrom != nil || r.Version.Manifest.Rows != 30 || len(e.versionRows(t, r.Version)) != 30 {
		t.Errorf("version %d: %d files, %d rows; want X's file alone, 30 rows", r.Version.Number, len(fs), r.Version.Manifest.Rows)
	}
}

func TestEdgeReappendAfterFix(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	A := csvBytes(header, mkRows("north", "A", 0, 30))
	e.ingest(t, "p", "d", A, "a.csv")
	r, err := e.ingestOpt(t, "p", "d", csvBytes(header, mkRows("north", "W", 0, 3)), IngestOptions{Mode: ModeReplaceWindow, From: genBase, To: genBase.Add(10 * time.Minute)})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("after fix: v%d rows %d", r.Version.Number, r.Version.Manifest.Rows)
	again := e.ingest(t, "p", "d", A, "a.csv")
	if again.Upload.Status != UploadDuplicate || again.Version.Number != 1 || len(e.versionRows(t, r.Version)) != int(r.Version.Manifest.Rows) {
		t.Errorf("nightly retry of a.csv after its correction: %s v%d, want a duplicate (the corrected file derives from it)", again.Upload.Status, again.Upload.Version)
	}
	// The same events in other bytes are compared event by event: the 20
	// the latest version holds are not stored again; the 10 the window
	// replaced are not held any more, so they are new.
	gz := e.ingest(t, "p", "d", gzipBytes(A), "a.csv.gz")
	if ev := gz.Upload.Events; gz.Upload.Status != UploadAccepted || ev.Held != 20 || ev.New != 10 || gz.Version.Manifest.Rows != 33 {
		t.Errorf("gzip of a.csv after its correction: %s v%d, %+v", gz.Upload.Status, gz.Upload.Version, ev)
	}
	// Sent once more in other bytes, it holds nothing new: a duplicate.
	again2 := e.ingest(t, "p", "d", gzipBytes(append(A, '\n')), "a2.csv.gz")
	if again2.Upload.Status != UploadDuplicate || again2.Version.Number != gz.Version.Number || again2.Upload.Events.Held != 30 {
		t.Errorf("third send: %s v%d, %+v", again2.Upload.Status, again2.Upload.Version, again2.Upload.Events)
	}
}

// distinctOf counts the distinct non-empty values of key among evs.
func distinctOf(evs []schema.Event, key func(*schema.Event) string) int {
	seen := map[string]bool{}
	for i := range evs {
		if k := key(&evs[i]); k != "" {
			seen[k] = true
		}
	}
	return len(seen)
}
