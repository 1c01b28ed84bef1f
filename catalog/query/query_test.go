package query

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/catalog/export"
)

// base is the first instant of the generated events, before the store's
// clock.
var base = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

// events is a CSV of n events of site, three per case (arrival, start,
// complete) a minute apart, from day.
func events(site, pfx string, day, n int) []byte {
	var b bytes.Buffer
	b.WriteString("site,case_id,resource_id,event_type,queue,occurred_at,event_id\n")
	for i := range n {
		at := base.Add(time.Duration(day)*24*time.Hour + time.Duration(i)*time.Minute)
		fmt.Fprintf(&b, "%s,%s%d,R-1,%s,q1,%s,%s-ev%d\n", site, pfx, i/3, []string{"arrival", "start", "complete"}[i%3], at.Format(time.RFC3339), pfx, i)
	}
	return b.Bytes()
}

// newStore is a real catalog (bbolt, local blobs) in a temporary folder
// with dataset p/d, published versions made of files.
func newStore(t *testing.T, files ...[]byte) *catalog.Store {
	t.Helper()
	dir := t.TempDir()
	blobs, err := localfs.New(filepath.Join(dir, "blobs"))
	if err != nil {
		t.Fatal(err)
	}
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	st, err := catalog.Open(filepath.Join(dir, "catalog.db"), blobs, catalog.Options{Master: mk, TempDir: t.TempDir(),
		Now: func() time.Time { return time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC) }})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	ctx := context.Background()
	if _, err := st.CreateProject(ctx, "p", "Ward flow study", "admin"); err != nil {
		t.Fatal(err)
	}
	if _, err := st.CreateDataset(ctx, catalog.DatasetSpec{Project: "p", Name: "d"}, "curator"); err != nil {
		t.Fatal(err)
	}
	for i, f := range files {
		if _, err := st.Ingest(ctx, "p", "d", bytes.NewReader(f), catalog.IngestOptions{Filename: fmt.Sprintf("f%d.csv", i), By: "site"}); err != nil {
			t.Fatal(err)
		}
	}
	return st
}

func version(t *testing.T, st *catalog.Store, n int) *catalog.Version {
	t.Helper()
	v, err := st.Version(context.Background(), "p", "d", n)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

// TestHeadlineNames checks that each headline figure's typed accessor
// reads the member its name gives as a path in the summary's JSON, the
// names diffs answer with.
func TestHeadlineNames(t *testing.T) {
	st := newStore(t, events("north", "A", 0, 30))
	sum, err := st.DecodedSummary(context.Background(), version(t, st, 1))
	if err != nil {
		t.Fatal(err)
	}
	raw, _ := json.Marshal(sum)
	var m map[string]any
	if err := json.Unmarshal(raw, &m); err != nil {
		t.Fatal(err)
	}
	for _, h := range Headline {
		var cur any = m
		for _, k := range strings.Split(h.Name, ".") {
			cur = cur.(map[string]any)[k]
		}
		if got, ok := cur.(float64); !ok || got != h.Value(sum) {
			t.Errorf("%s: JSON member %v, typed accessor %v", h.Name, cur, h.Value(sum))
		}
	}
	if sum.Events != 30 {
		t.Errorf("events %d, want 30", sum.Events)
	}
}

// TestCompare checks a diff of two versions: the events added, the
// deltas of the headline figures and the quality scores, and that the
// data of a retracted version is ErrRetracted.
func TestCompare(t *testing.T) {
	st := newStore(t, events("north", "A", 0, 30), events("south", "B", 1, 12))
	ctx := context.Background()
	a, b := version(t, st, 1), version(t, st, 2)
	d, err := Compare(ctx, st, a, b, export.Filter{})
	if err != nil {
		t.Fatal(err)
	}
	if d.From.Version != 1 || d.To.Version != 2 || d.Events.Added != 12 || d.Events.Removed != 0 {
		t.Errorf("diff %d -> %d: added %d removed %d, want 1 -> 2, 12 and 0", d.From.Version, d.To.Version, d.Events.Added, d.Events.Removed)
	}
	if ev := d.Summary["events"]; ev == nil || *ev != 12 {
		t.Errorf("summary delta of events %v, want 12", ev)
	}
	if c := d.Summary["cases.value"]; c == nil || *c != 4 {
		t.Errorf("summary delta of cases %v, want 4 (12 events, three per case)", c)
	}
	if len(d.Summary) != len(Headline) {
		t.Errorf("%d summary deltas, want %d", len(d.Summary), len(Headline))
	}
	ra, err := st.Report(ctx, a)
	if err != nil {
		t.Fatal(err)
	}
	rb, err := st.Report(ctx, b)
	if err != nil {
		t.Fatal(err)
	}
	if _, ok := d.Quality["score"]; ok != (ra.Score != nil && rb.Score != nil) {
		t.Errorf("quality delta %v: a score delta only where both reports score", d.Quality)
	}
	if ra.Score != nil && rb.Score != nil && d.Quality["score"] != *rb.Score-*ra.Score {
		t.Errorf("score delta %v, want %v", d.Quality["score"], *rb.Score-*ra.Score)
	}
	if _, err := st.Retract(ctx, "p", "d", 1, "bad clock", "curator"); err != nil {
		t.Fatal(err)
	}
	if _, err := Compare(ctx, st, version(t, st, 1), b, export.Filter{}); !errors.Is(err, catalog.ErrRetracted) {
		t.Errorf("diff with a retracted version: %v, want ErrRetracted", err)
	}
	if _, _, err := FilteredSummary(ctx, st, version(t, st, 1), export.Filter{}); !errors.Is(err, catalog.ErrRetracted) {
		t.Errorf("summary of a retracted version: %v, want ErrRetracted", err)
	}
}

// TestQualityDelta checks the deltas of typed reports: only scores both
// have, by dimension name.
func TestQualityDelta(t *testing.T) {
	if got := QualityDelta(nil, nil); len(got) != 0 {
		t.Errorf("no reports: %v", got)
	}
	if got := SummaryDelta(nil, nil); len(got) != len(Headline) || got["events"] != nil {
		t.Errorf("no summaries: %v, want every figure null", got)
	}
}

// TestFilteredSummary checks a summary under a site filter against the
// events of that site.
func TestFilteredSummary(t *testing.T) {
	st := newStore(t, events("north", "A", 0, 30), events("south", "B", 1, 12))
	sum, stats, err := FilteredSummary(context.Background(), st, version(t, st, 2), export.Filter{Sites: []string{"south"}})
	if err != nil {
		t.Fatal(err)
	}
	if sum.Events != 12 || sum.Cases.Value != 4 {
		t.Errorf("south: %d events, %v cases; want 12 and 4", sum.Events, sum.Cases.Value)
	}
	if stats.RowGroupsRead == 0 {
		t.Error("no row group read")
	}
}

// TestCitationInput checks the author a citation names: the server's
// setting, else the project's title, else its name.
func TestCitationInput(t *testing.T) {
	st := newStore(t, events("north", "A", 0, 6))
	ctx := context.Background()
	d, err := st.Dataset(ctx, "p", "d")
	if err != nil {
		t.Fatal(err)
	}
	v := version(t, st, 1)
	if ci := CitationInput(ctx, st, d, v, "Flow lab"); ci.Authors[0].Name != "Flow lab" || ci.Title != "p/d" || ci.Version != 1 {
		t.Errorf("with an author: %+v", ci)
	}
	if ci := CitationInput(ctx, st, d, v, ""); ci.Authors[0].Name != "Ward flow study" {
		t.Errorf("without: author %q, want the project's title", ci.Authors[0].Name)
	}
}
