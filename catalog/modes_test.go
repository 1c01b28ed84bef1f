package catalog

import (
	"bytes"
	"context"
	"crypto/sha256"
	"errors"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
)

// versionRows returns the events of every file of v as sorted text rows
// (pseudonyms included), so versions compare by content.
func (e *env) versionRows(t testing.TB, v *Version) []string {
	t.Helper()
	var out []string
	for _, f := range v.Manifest.Files {
		for _, ev := range readEvents(t, e.blobBytes(t, f.SHA256)) {
			var b strings.Builder
			for _, fl := range schema.Fields {
				b.WriteString(ev.Value(fl))
				b.WriteByte('|')
			}
			out = append(out, b.String())
		}
	}
	slices.Sort(out)
	return out
}

func (e *env) ingestOpt(t testing.TB, p, d string, data []byte, opt IngestOptions) (*IngestResult, error) {
	t.Helper()
	if opt.By == "" {
		opt.By = "site-uploader"
	}
	return e.s.Ingest(context.Background(), p, d, bytes.NewReader(data), opt)
}

// siteOf, atOf read the site and time of a generated row.
func atOf(t testing.TB, r row) time.Time {
	at, err := time.Parse(time.RFC3339Nano, r[7])
	if err != nil {
		t.Fatal(err)
	}
	return at.Truncate(time.Microsecond)
}

func TestUploadModes(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "lab", "flow", nil)
	rows := genRows(genOpt{Seed: 7, N: 3000})
	first := e.ingest(t, "lab", "flow", csvBytes(header, rows), "night1.csv")
	more := genRows(genOpt{Seed: 8, N: 1000, CasePfx: "D-"})
	second := e.ingest(t, "lab", "flow", csvBytes(header, more), "night2.csv")
	if second.Version.Number != 2 || second.Version.Manifest.Lineage.Mode != ModeAppend || second.Version.Manifest.Parent != 1 {
		t.Fatalf("append: version %d lineage %+v parent %d", second.Version.Number, second.Version.Manifest.Lineage, second.Version.Manifest.Parent)
	}
	if got := len(e.versionRows(t, second.Version)); got != 4000 {
		t.Fatalf("append: %d rows, want 4000", got)
	}

	// Replace site "north" in a one-day window with a corrected file: the
	// expected content is computed here from the generated rows.
	from := genBase.Add(24 * time.Hour)
	to := from.Add(24 * time.Hour)
	inWin := func(r row) bool { at := atOf(t, r); return !at.Before(from) && at.Before(to) }
	var corrected, expectKept []row
	for _, r := range append(slices.Clone(rows), more...) {
		if r[0] == "north" && inWin(r) {
			if len(corrected) < 40 {
				c := r
				c[10] = "corrected" // outcome
				corrected = append(corrected, c)
			}
			continue
		}
		expectKept = append(expectKept, r)
	}
	removed := int64(len(rows) + len(more) - len(expectKept))
	res, err := e.ingestOpt(t, "lab", "flow", csvBytes(header, corrected), IngestOptions{
		Filename: "north-fix.csv", Mode: ModeReplaceWindow, From: from, To: to,
	})
	if err != nil {
		t.Fatal(err)
	}
	v3 := res.Version
	lin := v3.Manifest.Lineage
	if v3.Number != 3 || lin.Mode != ModeReplaceWindow || !lin.From.Equal(from) || !lin.To.Equal(to) ||
		!slices.Equal(lin.Sites, []string{"north"}) || lin.RowsRemoved != removed || lin.Upload != res.Upload.ID {
		t.Fatalf("replace-window lineage %+v (removed want %d)", lin, removed)
	}
	got := e.versionRows(t, v3)
	if len(got) != len(expectKept)+len(corrected) {
		t.Fatalf("replace-window: %d rows, want %d kept + %d corrected", len(got), len(expectKept), len(corrected))
	}
	nCorrected := 0
	for _, r := range got {
		if strings.Contains(r, "|corrected|") {
			nCorrected++
		}
	}
	if nCorrected != len(corrected) {
		t.Fatalf("replace-window: %d corrected rows, want %d", nCorrected, len(corrected))
	}
	// Untouched files are shared with the parent; rewritten ones name their origin.
	derived := 0
	for _, f := range v3.Manifest.Files {
		if f.DerivedFrom != nil {
			derived++
			if _, ok := second.Version.File(*f.DerivedFrom); !ok {
				t.Errorf("file %s derived from %s, which v2 does not hold", f.SHA256, f.DerivedFrom)
			}
		}
	}
	if derived != 2 {
		t.Errorf("%d rewritten files, want 2 (both nights reach into the window)", derived)
	}
	// The parent is immutable.
	if again, _ := e.s.Version(context.Background(), "lab", "flow", 2); again.SnapshotID != second.Version.SnapshotID || len(e.versionRows(t, again)) != 4000 {
		t.Fatal("version 2 changed")
	}

	// replace-all: only the new file remains.
	all, err := e.ingestOpt(t, "lab", "flow", csvBytes(header, more[:100]), IngestOptions{Mode: ModeReplaceAll})
	if err != nil {
		t.Fatal(err)
	}
	if n := len(all.Version.Manifest.Files); n != 1 || all.Version.Manifest.Rows != 100 ||
		all.Version.Manifest.Lineage.RowsRemoved != v3.Manifest.Rows || !slices.Equal(all.Version.Manifest.Uploads, []UploadID{all.Upload.ID}) {
		t.Fatalf("replace-all: %d files, %d rows, lineage %+v uploads %v", n, all.Version.Manifest.Rows, all.Version.Manifest.Lineage, all.Version.Manifest.Uploads)
	}

	// The first night's bytes appended again are not a duplicate any more:
	// the latest version no longer holds their file.
	back := e.ingest(t, "lab", "flow", csvBytes(header, rows), "night1.csv")
	if back.Upload.Status != UploadAccepted || back.Version.Number != 5 || back.Version.Manifest.Rows != 3100 {
		t.Fatalf("re-append after replace-all: %s v%d rows %d", back.Upload.Status, back.Version.Number, back.Version.Manifest.Rows)
	}
	// And now they are.
	dup := e.ingest(t, "lab", "flow", csvBytes(header, rows), "night1.csv")
	if dup.Upload.Status != UploadDuplicate || dup.Version.Number != 5 {
		t.Fatalf("second re-append: %s v%d", dup.Upload.Status, dup.Version.Number)
	}
	_ = first
}

func TestReplaceWindowRefusals(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "lab", "flow", nil)
	rows := genRows(genOpt{Seed: 3, N: 500})
	e.ingest(t, "lab", "flow", csvBytes(header, rows), "n1.csv")
	from := genBase.Add(48 * time.Hour)
	to := from.Add(time.Hour)
	for _, tc := range []struct {
		name string
		opt  IngestOptions
		want string
	}{
		{"no window", IngestOptions{Mode: ModeReplaceWindow}, "needs both ends"},
		{"from after to", IngestOptions{Mode: ModeReplaceWindow, From: to, To: from}, "is not before"},
		{"window with append", IngestOptions{Mode: ModeAppend, From: from, To: to}, "replace-window only"},
		{"bad mode", IngestOptions{Mode: "merge"}, `upload mode "merge"`},
	} {
		_, err := e.ingestOpt(t, "lab", "flow", csvBytes(header, rows), tc.opt)
		if !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: err %v, want ErrInvalid with %q", tc.name, err, tc.want)
		}
	}
	// Events outside the window: rejected, located, nothing stored.
	blobsBefore := len(e.blobIDs(t))
	res, err := e.ingestOpt(t, "lab", "flow", csvBytes(header, rows), IngestOptions{Mode: ModeReplaceWindow, From: from, To: to})
	if !errors.Is(err, ErrRejected) || res.Upload.Status != UploadRejected || res.Upload.Error == nil ||
		res.Upload.Error.Rule != RuleOutsideWindow || res.Upload.Error.Line != 2 {
		t.Fatalf("outside window: err %v upload %+v", err, res)
	}
	// A site not named.
	var inside []row
	for _, r := range rows {
		if at := atOf(t, r); !at.Before(from) && at.Before(to) {
			inside = append(inside, r)
		}
	}
	if len(inside) == 0 {
		t.Fatal("fixture: no rows in the window")
	}
	res, err = e.ingestOpt(t, "lab", "flow", csvBytes(header, inside), IngestOptions{Mode: ModeReplaceWindow, From: from, To: to, Sites: []string{"atlantis"}})
	if !errors.Is(err, ErrRejected) || res.Upload.Error.Column != "site" {
		t.Fatalf("other site: err %v upload %+v", err, res.Upload.Error)
	}
	if n := len(e.blobIDs(t)); n != blobsBefore {
		t.Fatalf("refused replacements stored %d blobs", n-blobsBefore)
	}
	if v, _ := e.s.Version(context.Background(), "lab", "flow", 0); v.Number != 1 {
		t.Fatalf("latest is %d after refusals", v.Number)
	}
	// With sites named, an empty file removes their events in the window.
	empty := csvBytes(header, nil)
	res, err = e.ingestOpt(t, "lab", "flow", empty, IngestOptions{Mode: ModeReplaceWindow, From: from, To: to, Sites: []string{"north", "south", "east"}})
	if err != nil {
		t.Fatal(err)
	}
	if res.Version.Manifest.Rows != int64(len(rows)-len(inside)) || res.Version.Manifest.Lineage.RowsRemoved != int64(len(inside)) {
		t.Fatalf("removal: %d rows (removed %d), want %d", res.Version.Manifest.Rows, res.Version.Manifest.Lineage.RowsRemoved, len(rows)-len(inside))
	}
	// The same removal again changes nothing: a duplicate of the latest.
	res, err = e.ingestOpt(t, "lab", "flow", empty, IngestOptions{Mode: ModeReplaceWindow, From: from, To: to, Sites: []string{"north", "south", "east"}})
	if err != nil || res.Upload.Status != UploadDuplicate || res.Version.Number != 2 {
		t.Fatalf("repeat removal: %v %+v", err, res.Upload)
	}
}

func TestSelectorsAndStates(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "lab", "flow", func(s *DatasetSpec) { s.Drafts = true })
	clock := testNow
	e.open(t, func(o *Options) { o.Now = func() time.Time { return clock } })
	var vs []*Version
	for i := range 3 {
		clock = testNow.Add(time.Duration(i) * 24 * time.Hour)
		vs = append(vs, e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: uint64(i + 1), N: 200, CasePfx: string(rune('A' + i))}), "n.csv").Version)
	}
	for _, v := range vs {
		if v.State != StateDraft || v.PublishedAt != nil {
			t.Fatalf("version %d: state %s, want draft", v.Number, v.State)
		}
	}
	latest := Selector{Kind: SelectLatest}
	if _, err := e.s.Resolve(ctx, "lab", "flow", latest, true); !errors.Is(err, ErrNotFound) {
		t.Fatalf("latest with only drafts: %v", err)
	}
	if _, err := e.s.Resolve(ctx, "lab", "flow", Selector{Kind: SelectNumber, Number: 2}, false); !errors.Is(err, ErrNotFound) {
		t.Fatalf("a member sees draft 2: %v", err)
	}
	clock = testNow.Add(5 * 24 * time.Hour)
	if _, err := e.s.Publish(ctx, "lab", "flow", 1, "curator"); err != nil {
		t.Fatal(err)
	}
	clock = testNow.Add(6 * 24 * time.Hour)
	if _, err := e.s.Publish(ctx, "lab", "flow", 2, "curator"); err != nil {
		t.Fatal(err)
	}
	clock = testNow.Add(7 * 24 * time.Hour)
	if _, err := e.s.Retract(ctx, "lab", "flow", 2, "site north sent test data", "curator"); err != nil {
		t.Fatal(err)
	}
	if _, err := e.s.Retract(ctx, "lab", "flow", 2, "again", "curator"); !errors.Is(err, ErrState) {
		t.Fatalf("retract twice: %v", err)
	}
	if _, err := e.s.Publish(ctx, "lab", "flow", 2, "curator"); !errors.Is(err, ErrState) {
		t.Fatalf("publish retracted: %v", err)
	}
	if _, err := e.s.Retract(ctx, "lab", "flow", 1, "  ", "curator"); !errors.Is(err, ErrInvalid) {
		t.Fatalf("retract without reason: %v", err)
	}
	sel := func(s string) Selector {
		t.Helper()
		x, err := ParseSelector(s)
		if err != nil {
			t.Fatal(err)
		}
		return x
	}
	for _, tc := range []struct {
		sel    string
		drafts bool
		want   int // 0 = not found
	}{
		{"latest", false, 1}, // 2 is retracted, 3 a draft
		{"1", false, 1},
		{"2", false, 2}, // retracted versions stay addressable
		{"3", false, 0},
		{"3", true, 3},
		{vs[0].SnapshotID.String()[:8], false, 1},
		{strings.ToUpper(vs[1].SnapshotID.String()[:12]), false, 2},
		{vs[2].SnapshotID.String()[:10], false, 0},
		{vs[2].SnapshotID.String(), true, 3},
		{testNow.Add(5*24*time.Hour - time.Second).Format(time.RFC3339), false, 0}, // before any publication
		{testNow.Add(5 * 24 * time.Hour).Format(time.RFC3339), false, 1},
		{testNow.Add(6*24*time.Hour + time.Hour).Format(time.RFC3339), false, 2}, // 2 was current then
		{testNow.Add(8 * 24 * time.Hour).Format(time.RFC3339Nano), false, 1},     // after the retraction
	} {
		v, err := e.s.Resolve(ctx, "lab", "flow", sel(tc.sel), tc.drafts)
		switch {
		case tc.want == 0 && !errors.Is(err, ErrNotFound):
			t.Errorf("@%s (drafts %v): %v, want not found", tc.sel, tc.drafts, err)
		case tc.want != 0 && (err != nil || v.Number != tc.want):
			t.Errorf("@%s (drafts %v): %v %v, want version %d", tc.sel, tc.drafts, v, err, tc.want)
		}
	}
	v2, _ := e.s.Version(ctx, "lab", "flow", 2)
	if v2.State != StateRetracted || v2.RetractReason != "site north sent test data" || v2.SnapshotID != vs[1].SnapshotID {
		t.Fatalf("retracted v2: %+v", v2)
	}
	var actions []string
	audit, _ := e.s.Audit(ctx)
	for _, a := range audit {
		actions = append(actions, a.Action)
	}
	if !slices.Contains(actions, "version.publish") || !slices.Contains(actions, "version.retract") {
		t.Fatalf("audit %v", actions)
	}
}

func TestParseSelector(t *testing.T) {
	for _, tc := range []struct {
		in   string
		kind SelectorKind
		bad  string
	}{
		{"", SelectLatest, ""},
		{"latest", SelectLatest, ""},
		{"7", SelectNumber, ""},
		{"9999999", SelectNumber, ""},
		{"0", 0, "want a number from 1"},
		{"0000000", 0, "want a number from 1"},
		{"deadbeef", SelectSnapshot, ""},
		{"12345678", SelectSnapshot, ""}, // eight digits: a snapshot prefix that happens to be decimal
		{"abc", 0, "want 8 to 64 hex digits"},
		{"2026-03-01T00:00:00Z", SelectTime, ""},
		{"2026-03-01T00:00:00+01:00", SelectTime, ""},
		{"2026-03-01T00:00:00", 0, "want RFC 3339"},
		{"yesterday", 0, "version selector"},
		{"v3", 0, "version selector"},
	} {
		s, err := ParseSelector(tc.in)
		if tc.bad != "" {
			if !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), tc.bad) {
				t.Errorf("%q: err %v, want %q", tc.in, err, tc.bad)
			}
			continue
		}
		if err != nil || s.Kind != tc.kind {
			t.Errorf("%q: %+v %v, want kind %d", tc.in, s, err, tc.kind)
		}
	}
	if p, d, s, err := SplitRef("lab/flow@3"); err != nil || p != "lab" || d != "flow" || s.Number != 3 {
		t.Errorf("SplitRef: %s %s %+v %v", p, d, s, err)
	}
	for _, bad := range []string{"lab", "lab/", "/flow", "lab/flow/x", "lab/flow@"} {
		if _, _, _, err := SplitRef(bad); !errors.Is(err, ErrInvalid) {
			t.Errorf("SplitRef(%q): %v", bad, err)
		}
	}
}

func TestGarbageCollection(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "lab", "flow", nil)
	e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 1, N: 300}), "a.csv")
	// An orphan, as a crash between put and commit leaves.
	orphan := []byte("PAR1 not really\n")
	oid := blob.ID(sha256.Sum256(orphan))
	if err := e.blobs.Put(ctx, oid, bytes.NewReader(orphan)); err != nil {
		t.Fatal(err)
	}
	res, err := e.s.CollectGarbage(ctx, GCOptions{}, "admin")
	if err != nil || len(res.Deleted) != 0 || res.Young != 1 {
		t.Fatalf("within grace: %+v %v", res, err)
	}
	res, err = e.s.CollectGarbage(ctx, GCOptions{Grace: -1, DryRun: true}, "admin")
	if err != nil || !slices.Equal(res.Deleted, []blob.ID{oid}) || !containsID(e.blobIDs(t), oid) {
		t.Fatalf("dry run: %+v %v", res, err)
	}

	// A collection during an upload: after the new file is put, before its
	// version commits. It must keep that file, and every referenced one.
	var during *GCResult
	testHookBeforeCommit = func() {
		testHookBeforeCommit = nil
		r, err := e.s.CollectGarbage(ctx, GCOptions{Grace: -1}, "admin")
		if err != nil {
			t.Error(err)
		}
		during = r
	}
	t.Cleanup(func() { testHookBeforeCommit = nil })
	res2 := e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 2, N: 300, CasePfx: "Z"}), "b.csv")
	if during == nil || during.Pending != 1 || !slices.Equal(during.Deleted, []blob.ID{oid}) {
		t.Fatalf("collection during upload: %+v", during)
	}
	// And one that lists the blobs before a whole upload runs and decides
	// after it: the new version's file was not listed, the old ones are
	// referenced.
	testHookGCBetween = func() {
		testHookGCBetween = nil
		e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 3, N: 300, CasePfx: "Y"}), "c.csv")
	}
	t.Cleanup(func() { testHookGCBetween = nil })
	if r, err := e.s.CollectGarbage(ctx, GCOptions{Grace: -1}, "admin"); err != nil || len(r.Deleted) != 0 {
		t.Fatalf("collection around an upload: %+v %v", r, err)
	}
	vs, err := e.s.Versions(ctx, "lab", "flow")
	if err != nil {
		t.Fatal(err)
	}
	for _, v := range vs {
		for _, f := range v.Manifest.Files {
			e.blobBytes(t, f.SHA256) // fails the test when missing or corrupt
		}
	}
	if len(vs) != 3 || res2.Version.Number != 2 {
		t.Fatalf("%d versions", len(vs))
	}
	if containsID(e.blobIDs(t), oid) {
		t.Fatal("orphan survived")
	}
}

func containsID(ids []blob.ID, id blob.ID) bool { return slices.Contains(ids, id) }
