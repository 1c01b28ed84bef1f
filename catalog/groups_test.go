package catalog

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"maps"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
)

// sameAsFullPass ingests each upload into dataset inc (through the case
// groups) and into dataset full (a full per-case pass at every commit,
// the way before groups), both in project p of one store (so the same
// pseudonyms), and checks after every commit that the version's summary
// JSON, quality report JSON and case table are byte for byte the same. It
// returns the groups' statistics of inc's commits.
func sameAsFullPass(t *testing.T, e *env, uploads [][]byte, names []string) []groupStats {
	t.Helper()
	ctx := context.Background()
	var stats []groupStats
	var got *groupStats
	testHookGroups = func(s groupStats) { got = &s }
	defer func() { testHookGroups = nil }()
	defer func(now func() time.Time) { e.s.opt.Now = now }(e.s.opt.Now)
	for i, body := range uploads {
		// Each upload received an hour after the one before (both
		// datasets alike): groups made at one receipt merge with those
		// made at another.
		at := testNow.Add(time.Duration(i) * time.Hour)
		e.s.opt.Now = func() time.Time { return at }
		got = nil
		e.s.noCaseGroups = false
		inc := e.ingest(t, "p", "inc", body, names[i])
		if got == nil {
			t.Fatalf("upload %d: no groups made", i)
		}
		stats = append(stats, *got)
		e.s.noCaseGroups = true
		full := e.ingest(t, "p", "full", body, names[i])
		e.s.noCaseGroups = false
		if inc.Upload.Status != full.Upload.Status {
			t.Fatalf("upload %d: %s and %s", i, inc.Upload.Status, full.Upload.Status)
		}
		if inc.Version == nil {
			continue
		}
		a, b := inc.Version, full.Version
		sa, err := e.s.Summary(ctx, "p/inc", a.Number)
		if err != nil {
			t.Fatal(err)
		}
		sb, err := e.s.Summary(ctx, "p/full", b.Number)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(sa, sb) {
			t.Fatalf("upload %d: summaries differ:\n%s", i, firstDiff(sa, sb))
		}
		qa, _ := json.Marshal(e.report(t, a))
		qb, _ := json.Marshal(e.report(t, b))
		if !bytes.Equal(qa, qb) {
			t.Fatalf("upload %d: quality reports differ:\n%s", i, firstDiff(qa, qb))
		}
		if !bytes.Equal(e.blobBytes(t, a.Manifest.CaseTable.SHA256), e.blobBytes(t, b.Manifest.CaseTable.SHA256)) {
			t.Fatalf("upload %d: case tables differ", i)
		}
		if a.Manifest.CaseTable.Rows != b.Manifest.CaseTable.Rows {
			t.Fatalf("upload %d: case table rows %d and %d", i, a.Manifest.CaseTable.Rows, b.Manifest.CaseTable.Rows)
		}
	}
	// The case table read by an independent reader: one row per case id.
	v, err := e.s.Version(ctx, "p", "inc", 0)
	if err != nil {
		t.Fatal(err)
	}
	ids := map[string]bool{}
	for _, c := range readArrowCases(t, e.caseTable(t, v)) {
		if ids[c.id] {
			t.Fatalf("case %s has two rows", c.id)
		}
		ids[c.id] = true
	}
	if int64(len(ids)) != v.Manifest.CaseTable.Rows {
		t.Errorf("%d case ids in %d rows", len(ids), v.Manifest.CaseTable.Rows)
	}
	return stats
}

func firstDiff(a, b []byte) string {
	i := 0
	for i < len(a) && i < len(b) && a[i] == b[i] {
		i++
	}
	from := max(0, i-120)
	return fmt.Sprintf("at byte %d:\n%.300s\n%.300s", i, a[from:], b[from:])
}

// TestGroupsEqualFullPassContactLine: nightly uploads of a contact line
// (cases of five events within a day; 5% of events first sent one to three
// nights late, so a night continues cases of the nights before; copies in
// an upload), through the groups and by a full pass: the same figures,
// byte for byte, at every version. The second half runs with groups cut
// small and few allowed, so full passes make several groups and
// compaction runs.
func TestGroupsEqualFullPassContactLine(t *testing.T) {
	for _, small := range []bool{false, true} {
		t.Run(fmt.Sprintf("small=%t", small), func(t *testing.T) {
			if small {
				defer func(a int64, b int) { groupMaxEvents, maxGroups = a, b }(groupMaxEvents, maxGroups)
				groupMaxEvents, maxGroups = 100, 6
			}
			o := seriesOpt{Seed: 5, Nights: 14, PerDay: 300, Window: 3, Late: 0.05, Correct: 0.01, Copies: 0.01}
			e := newEnv(t, func(o *Options) { o.RunEvents = 400; o.RowGroupRows = 200 })
			e.dataset(t, "p", "inc", nil)
			e.dataset(t, "p", "full", nil)
			var ups [][]byte
			var names []string
			for n := 0; n < o.Nights; n++ {
				ups = append(ups, csvBytes(header, night(o, n)))
				names = append(names, fmt.Sprintf("night-%02d.csv", n))
			}
			stats := sameAsFullPass(t, e, ups, names)
			var compacted, multi int
			for i, s := range stats {
				if i > 0 && !s.Incremental {
					t.Errorf("night %d: not incremental", i)
				}
				if s.Groups > maxGroups {
					t.Errorf("night %d: %d groups, over %d", i, s.Groups, maxGroups)
				}
				compacted += s.Compacted
				if s.Groups > 1 {
					multi++
				}
			}
			if small && (compacted == 0 || stats[0].Groups < 2) {
				t.Errorf("small groups: compacted %d, first version's groups %d; the test would not cover them", compacted, stats[0].Groups)
			}
			if multi == 0 {
				t.Error("never more than one group")
			}
		})
	}
}

// TestGroupsEqualFullPassSepsis: the sepsis log (testdata/sepsis) cut into
// monthly appends, a third of whose cases span months, through the groups
// and by a full pass: the same figures, byte for byte, at every version.
func TestGroupsEqualFullPassSepsis(t *testing.T) {
	head, byMonth, months := sepsisMonths(t)
	prof, err := os.ReadFile(filepath.Join("..", "testdata", "sepsis", "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	e := newEnv(t, func(o *Options) { o.RunEvents = 2000 })
	e.dataset(t, "p", "inc", func(s *DatasetSpec) { s.Profile = prof })
	e.dataset(t, "p", "full", func(s *DatasetSpec) { s.Profile = prof })
	var ups [][]byte
	var names []string
	for _, m := range months {
		ups = append(ups, []byte(head+"\n"+strings.Join(byMonth[m], "\n")+"\n"))
		names = append(names, "sepsis-"+strings.ReplaceAll(m, "/", "-")+".csv")
	}
	stats := sameAsFullPass(t, e, ups, names)
	var touched int
	for _, s := range stats[1:] {
		if !s.Incremental {
			t.Error("a monthly append was not incremental")
		}
		touched += s.Touched
	}
	if touched == 0 {
		t.Error("no append continued a case of an earlier group")
	}
	v, err := e.s.Version(context.Background(), "p", "inc", 0)
	if err != nil {
		t.Fatal(err)
	}
	// README of testdata/sepsis: 1050 cases.
	if q := e.report(t, v); q.Cases.Count != 1050 {
		t.Errorf("%d cases, published 1050", q.Cases.Count)
	}
	// The trace variants, read with the standard library: each case's
	// activities in time order, events of one instant in the file's
	// order, an event equal to an earlier one in every mapped column
	// stored once (as the upload stores a copy within its file). The
	// log's own Variant column has 846 distinct values; one of its
	// traces differs from another only by such a copy, hence 845.
	cols := strings.Split(head, ";")
	key := []int{slices.Index(cols, "Case ID"), slices.Index(cols, "Activity"), slices.Index(cols, "Complete Timestamp"), slices.Index(cols, "org:group"), slices.Index(cols, "lifecycle:transition")}
	type step struct{ at, act string }
	seen := map[string]bool{}
	byCase := map[string][]step{}
	for _, m := range months {
		for _, l := range byMonth[m] {
			f := strings.Split(l, ";")
			var k []string
			for _, i := range key {
				k = append(k, f[i])
			}
			if seen[strings.Join(k, ";")] {
				continue
			}
			seen[strings.Join(k, ";")] = true
			byCase[f[key[0]]] = append(byCase[f[key[0]]], step{f[key[2]], f[key[1]]})
		}
	}
	variants := map[string]bool{}
	for _, st := range byCase {
		slices.SortStableFunc(st, func(a, b step) int { return strings.Compare(a.at, b.at) }) // yyyy/mm/dd hh:mm:ss.fff
		var seq []string
		for _, x := range st {
			seq = append(seq, x.act)
		}
		variants[strings.Join(seq, "\x00")] = true
	}
	for _, d := range []string{"inc", "full"} {
		b, err := e.s.Summary(context.Background(), "p/"+d, len(months))
		if err != nil {
			t.Fatal(err)
		}
		var sum summary.Summary
		if err := json.Unmarshal(b, &sum); err != nil {
			t.Fatal(err)
		}
		if sum.Process == nil {
			t.Fatalf("%s: no process views", d)
		}
		if sum.Process.DistinctVariant != uint64(len(variants)) || len(variants) != 845 {
			t.Errorf("%s: %d distinct variants, standard library %d (845)", d, sum.Process.DistinctVariant, len(variants))
		}
	}
}

// sepsisLines reads the sepsis log (testdata/sepsis): its header line and
// its rows, in the file's order.
func sepsisLines(t *testing.T) []string {
	t.Helper()
	return gzipLines(t, filepath.Join("..", "testdata", "sepsis", "sepsis-cases.csv.gz"))
}

// gzipLines reads a gzip-compressed text file of testdata into its lines.
func gzipLines(t *testing.T, path string) []string {
	t.Helper()
	gz, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	zr, err := gzip.NewReader(bytes.NewReader(gz))
	if err != nil {
		t.Fatal(err)
	}
	raw, err := io.ReadAll(zr)
	if err != nil {
		t.Fatal(err)
	}
	return strings.Split(strings.TrimRight(string(raw), "\r\n"), "\n")
}

// sepsisMonths reads the sepsis log and cuts it by the month of each event.
func sepsisMonths(t *testing.T) (head string, byMonth map[string][]string, months []string) {
	lines := sepsisLines(t)
	byMonth = map[string][]string{}
	for _, l := range lines[1:] {
		f := strings.SplitN(l, ";", 4) // Case ID;Activity;Complete Timestamp;...
		if len(f) < 4 || len(f[2]) < 7 {
			t.Fatalf("unexpected row %q", l)
		}
		byMonth[f[2][:7]] = append(byMonth[f[2][:7]], l)
	}
	return lines[0], byMonth, slices.Sorted(maps.Keys(byMonth))
}

// TestGroupsNightTouchesItsCases: thirty nightly uploads of 7-day windows
// (late events continue cases of up to three nights before): a night
// reads again only the events of the groups that hold its cases, and
// writes only those and its own; neither grows with the version, which
// grows 2.5-fold.
func TestGroupsNightTouchesItsCases(t *testing.T) {
	o := seriesOpt{Seed: 9, Nights: 30, PerDay: 200, Window: 7, Late: 0.03, Copies: 0.0005}
	e := newEnv(t, func(o *Options) { o.RunEvents = 1000 })
	e.dataset(t, "p", "d", nil)
	var stats []groupStats
	var rows []int64
	testHookGroups = func(s groupStats) { stats = append(stats, s) }
	defer func() { testHookGroups = nil }()
	for n := 0; n < o.Nights; n++ {
		res := e.ingest(t, "p", "d", csvBytes(header, night(o, n)), "night.csv")
		rows = append(rows, res.Version.Manifest.Rows)
	}
	if len(stats) != o.Nights {
		t.Fatalf("%d commits made groups, want %d", len(stats), o.Nights)
	}
	first, last := stats[o.Window:o.Window+5], stats[o.Nights-5:]
	sum := func(ss []groupStats, f func(groupStats) int64) (n int64) {
		for _, s := range ss {
			n += f(s)
		}
		return n
	}
	read := func(s groupStats) int64 { return s.Read }
	written := func(s groupStats) int64 { return s.Written }
	t.Logf("nights %d-%d: read %d, written %d, version rows %d; last five: read %d, written %d, version rows %d",
		o.Window, o.Window+4, sum(first, read), sum(first, written), rows[o.Window+4], sum(last, read), sum(last, written), rows[o.Nights-1])
	if rows[o.Nights-1] < 2*rows[o.Window+4] {
		t.Fatalf("the version grew from %d to %d rows only", rows[o.Window+4], rows[o.Nights-1])
	}
	for _, f := range []struct {
		name string
		f    func(groupStats) int64
	}{{"read", read}, {"written", written}} {
		a, b := sum(first, f.f), sum(last, f.f)
		if a == 0 || float64(b) > 1.5*float64(a) {
			t.Errorf("events %s: %d in the first five full nights, %d in the last five: grows with the version", f.name, a, b)
		}
	}
	// The groups a night replaced are deleted with its commit: the store
	// holds no group blob but those of the latest set.
	cur := e.groupBlobs(t)
	var stray int
	e.blobs.List(context.Background(), func(i blob.Info) error {
		if b := e.blobBytes(t, i.ID); !bytes.HasPrefix(b, []byte("PAR1")) && !cur[i.ID] {
			stray++
		}
		return nil
	})
	if stray > 0 {
		t.Errorf("%d group blobs left behind by replaced groups", stray)
	}
	for n, s := range stats {
		// Past two windows of history, a night reads less than half.
		if n > 0 && !s.Incremental || n >= 2*o.Window && 2*s.Read >= rows[n-1] {
			t.Errorf("night %d: %+v, the parent has %d rows", n, s, rows[n-1])
		}
	}
}

// TestCrashBetweenGroupsAndCommit kills the process after the new
// version's groups are stored and before its transaction: the catalog
// keeps version 1 with its groups, the collection removes the new groups'
// blobs (nothing references them), and the next append extends version
// 1's groups.
func TestCrashBetweenGroupsAndCommit(t *testing.T) {
	e, first := crashSetup(t)
	e.open(t, nil)
	before := e.groupBlobs(t)
	set, err := e.s.loadGroups("crash/events")
	if err != nil || set == nil || set.Version != 1 {
		t.Fatalf("groups of version 1: %+v, %v", set, err)
	}
	e.s.Close()
	e.s = nil
	cmd := crashChildCmd(t, e, "groups")
	out, err := cmd.CombinedOutput()
	var xe *exec.ExitError
	if !errors.As(err, &xe) || xe.ExitCode() != 3 {
		t.Fatalf("child did not stop at the groups hook: %v\n%s", err, out)
	}
	crashCheck(t, e, first)
	if after := e.groupBlobs(t); !maps.Equal(before, after) {
		t.Errorf("the stored groups changed: %d blobs, were %d", len(after), len(before))
	}
	ctx := context.Background()
	var all []string
	e.blobs.List(ctx, func(i blob.Info) error { all = append(all, i.ID.String()); return nil })
	res, err := e.s.CollectGarbage(ctx, GCOptions{Grace: -1}, "test")
	if err != nil {
		t.Fatal(err)
	}
	// The orphans: the upload's file, and the new groups' blobs.
	if len(res.Deleted) < 2 {
		t.Errorf("gc deleted %d blobs of %d, want the crashed commit's file and groups", len(res.Deleted), len(all))
	}
	for _, id := range res.Deleted {
		if before[id] {
			t.Errorf("gc deleted %s, a blob of version 1's groups", id)
		}
	}
	var got *groupStats
	testHookGroups = func(s groupStats) { got = &s }
	defer func() { testHookGroups = nil }()
	again := e.ingest(t, "crash", "events", genCSV(genOpt{Seed: 2, N: 3000, CasePfx: crashRaw}), "night.csv")
	if again.Version.Number != 2 || got == nil || !got.Incremental {
		t.Fatalf("after the crash: version %d, groups %+v", again.Version.Number, got)
	}
	if q := e.report(t, again.Version); q.Rows.Accepted != again.Version.Manifest.Rows {
		t.Errorf("report counts %d rows of %d", q.Rows.Accepted, again.Version.Manifest.Rows)
	}
}

// TestGroupsUnreadableFallBack: when a blob of the parent's groups is gone,
// the commit makes its groups by a full pass, and the figures are those of
// a full pass.
func TestGroupsUnreadableFallBack(t *testing.T) {
	o := seriesOpt{Seed: 3, Nights: 3, PerDay: 100, Window: 2, Late: 0.1}
	e := newEnv(t, nil)
	e.dataset(t, "p", "inc", nil)
	e.dataset(t, "p", "full", nil)
	var ups [][]byte
	for n := 0; n < o.Nights; n++ {
		ups = append(ups, csvBytes(header, night(o, n)))
	}
	names := []string{"a.csv", "b.csv", "c.csv"}
	sameAsFullPass(t, e, ups[:2], names[:2])
	set, err := e.s.loadGroups("p/inc")
	if err != nil || set == nil {
		t.Fatal(set, err)
	}
	if err := e.blobs.Delete(context.Background(), set.Groups[0].Keys); err != nil {
		t.Fatal(err)
	}
	stats := sameAsFullPass(t, e, ups[2:], names[2:])
	if stats[0].Incremental {
		t.Errorf("%+v: incremental without the parent's groups", stats[0])
	}
	if !strings.Contains(e.logs.String(), "case groups unreadable") {
		t.Error("the fallback was not logged")
	}
}
