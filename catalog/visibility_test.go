package catalog

import (
	"context"
	"errors"
	"strings"
	"testing"
)

// TestVisibility checks the catalog's rules of what a reader sees: a
// draft's uploads, trend points and number are hidden from readers who do
// not see drafts, and a retracted version's data is ErrRetracted, naming
// when and why, while the version itself still resolves.
func TestVisibility(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Drafts = true })
	e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "A", 0, 30)), "a.csv")
	e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "B", 0, 30)), "b.csv")
	if _, err := e.s.Publish(ctx, "p", "d", 1, "cur"); err != nil {
		t.Fatal(err)
	}
	// Version 2 stays a draft.
	unseen, err := e.s.Unpublished(ctx, "p", "d", false)
	if err != nil {
		t.Fatal(err)
	}
	if len(unseen) != 1 || !unseen[2] {
		t.Errorf("unpublished %v, want version 2 only", unseen)
	}
	if all, err := e.s.Unpublished(ctx, "p", "d", true); err != nil || all != nil {
		t.Errorf("a reader of drafts: unpublished %v, %v; want none", all, err)
	}
	ups, err := e.s.VisibleUploads(ctx, "p", "d", false)
	if err != nil {
		t.Fatal(err)
	}
	if len(ups) != 1 || ups[0].Version != 1 {
		t.Errorf("a member sees uploads %+v, want the one of version 1", ups)
	}
	if ups, _ := e.s.VisibleUploads(ctx, "p", "d", true); len(ups) != 2 {
		t.Errorf("a curator sees %d uploads, want 2", len(ups))
	}
	points, _, err := e.s.VisibleTrend(ctx, "p", "d", "", false)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range points {
		if p.Version == 2 {
			t.Errorf("a member sees the trend point of draft version 2: %+v", p)
		}
	}
	if len(points) == 0 {
		t.Error("a member sees no trend point of the published version")
	}

	sel := Selector{Kind: SelectNumber, Number: 1}
	if v, err := e.s.ServableVersion(ctx, "p", "d", sel, false); err != nil || v.Servable() != nil {
		t.Fatalf("published version 1: %v", err)
	}
	if _, err := e.s.Retract(ctx, "p", "d", 1, "wrong site codes", "cur"); err != nil {
		t.Fatal(err)
	}
	_, err = e.s.ServableVersion(ctx, "p", "d", sel, false)
	if !errors.Is(err, ErrRetracted) {
		t.Fatalf("data of a retracted version: %v, want ErrRetracted", err)
	}
	if msg := err.Error(); !strings.HasPrefix(msg, "version 1 of p/d was retracted on ") || !strings.Contains(msg, ": wrong site codes; its metadata and citation stay readable") {
		t.Errorf("message %q does not say which version, when and why", msg)
	}
	if _, err := e.s.Resolve(ctx, "p", "d", sel, false); err != nil {
		t.Errorf("a retracted version's record no longer resolves: %v", err)
	}
}
