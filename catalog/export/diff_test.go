package export

import (
	"context"
	"fmt"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

func TestDiffSharedFiles(t *testing.T) {
	e, vs := fixture(t, 100)
	a, b := vs[0].Manifest.Files, vs[2].Manifest.Files
	for _, read := range []bool{false, true} {
		res, err := Diff(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, a, b, DiffOptions{ReadShared: read})
		if err != nil {
			t.Fatal(err)
		}
		if res.Added != 1800 || res.Removed != 0 {
			t.Errorf("read shared %v: added %d removed %d, want 1800 and 0", read, res.Added, res.Removed)
		}
		if read && (res.Same != 900 || res.SharedFiles != 0) || !read && (res.Same != 0 || res.SharedFiles != 1 || res.SharedRows != 900 || res.StatsA.Files != 0) {
			t.Errorf("read shared %v: %+v", read, res)
		}
		var sum int64
		for _, c := range res.BySite {
			sum += c.Added
		}
		if sum != 1800 {
			t.Errorf("per site and day added sum to %d", sum)
		}
	}
	// The other way round, the same counts swap.
	res, err := Diff(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, b, a, DiffOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if res.Added != 0 || res.Removed != 1800 || len(res.FirstRemoved) != DefaultDiffSamples {
		t.Errorf("reverse: %+v", res)
	}
}

// contentKey is an event's stored fields, for multiset counting in Go.
type contentKey struct {
	e schema.Event
}

func TestDiffMultiset(t *testing.T) {
	e := newEnv(t, 64)
	e.dataset(t, "er", "a")
	e.dataset(t, "er", "b")
	base := genRows(7, 600, 0)
	extra := genRows(8, 300, 1)
	va := e.ingest(t, "er", "a", csvBytes(base), "a.csv")
	bRows := slices.Concat(base[:400], extra, base[:50]) // drops 200, adds 300 new and 50 copies
	vb := e.ingest(t, "er", "b", csvBytes(bRows), "b.csv")

	evA, evB := e.allEvents(t, va.Manifest.Files), e.allEvents(t, vb.Manifest.Files)
	want := &DiffResult{}
	type sd struct{ site, day string }
	per := map[sd]*DiffCount{}
	bump := func(ev *schema.Event) *DiffCount {
		k := sd{ev.Site, ev.OccurredAt.Format(time.DateOnly)}
		if per[k] == nil {
			per[k] = &DiffCount{Site: k.site, Day: k.day}
		}
		return per[k]
	}
	walk := func(from, against []schema.Event, n *int64, first *[]time.Time, added bool) {
		left := map[contentKey]int{}
		for _, ev := range against {
			left[contentKey{ev}]++
		}
		for _, ev := range sorted(from, Filter{}) {
			if left[contentKey{ev}] > 0 {
				left[contentKey{ev}]--
				continue
			}
			*n++
			if added {
				bump(&ev).Added++
			} else {
				bump(&ev).Removed++
			}
			if len(*first) < 3 {
				*first = append(*first, ev.OccurredAt)
			}
		}
	}
	walk(evB, evA, &want.Added, &want.FirstAdded, true)
	walk(evA, evB, &want.Removed, &want.FirstRemoved, false)
	if want.Added < 300 || want.Removed < 150 {
		t.Fatalf("fixture: added %d removed %d", want.Added, want.Removed)
	}
	got, err := Diff(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, va.Manifest.Files, vb.Manifest.Files, DiffOptions{Samples: 3})
	if err != nil {
		t.Fatal(err)
	}
	if got.Added != want.Added || got.Removed != want.Removed || got.Same != int64(len(evA))-want.Removed || got.Same != int64(len(evB))-want.Added {
		t.Errorf("diff %d added %d removed %d same, want %d and %d", got.Added, got.Removed, got.Same, want.Added, want.Removed)
	}
	if !slices.EqualFunc(got.FirstAdded, want.FirstAdded, time.Time.Equal) || !slices.EqualFunc(got.FirstRemoved, want.FirstRemoved, time.Time.Equal) {
		t.Errorf("first instants %v %v, want %v %v", got.FirstAdded, got.FirstRemoved, want.FirstAdded, want.FirstRemoved)
	}
	if len(got.BySite) != len(per) {
		t.Fatalf("%d site-days, want %d", len(got.BySite), len(per))
	}
	for _, c := range got.BySite {
		if w := per[sd{c.Site, c.Day}]; w == nil || *w != c {
			t.Errorf("site-day %+v, want %+v", c, w)
		}
	}
	// A version against itself: nothing added or removed, by files or by reading.
	for _, read := range []bool{false, true} {
		self, err := Diff(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, vb.Manifest.Files, vb.Manifest.Files, DiffOptions{ReadShared: read})
		if err != nil || self.Added != 0 || self.Removed != 0 {
			t.Errorf("self diff (read %v): %+v %v", read, self, err)
		}
	}
	// The filter applies to both sides.
	f := Filter{Sites: []string{"north"}}
	gotN, err := Diff(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, va.Manifest.Files, vb.Manifest.Files, DiffOptions{Filter: f})
	if err != nil {
		t.Fatal(err)
	}
	var addN int64
	for _, c := range got.BySite {
		if c.Site == "north" {
			addN += c.Added
		}
	}
	if gotN.Added != addN {
		t.Errorf("north only: added %d, want %d", gotN.Added, addN)
	}
}

// BenchmarkEventsFiltered streams a one-day window of one site out of a
// version of 8 files of 20000 events in row groups of 1000 rows.
func BenchmarkEventsFiltered(b *testing.B) {
	e := newEnv(b, 1000)
	e.dataset(b, "er", "visits")
	var v *catalog.Version
	for i := range 8 {
		v = e.ingest(b, "er", "visits", csvBytes(genRows(uint64(100+i), 20000, 3*i)), fmt.Sprintf("n%d.csv", i))
	}
	f := Filter{From: genBase.AddDate(0, 0, 7), To: genBase.AddDate(0, 0, 8), Sites: []string{"north"}}
	for _, bc := range []struct {
		name string
		f    Filter
	}{{"window+site", f}, {"all", Filter{}}} {
		b.Run(bc.name, func(b *testing.B) {
			var st Stats
			for b.Loop() {
				var err error
				st, err = Events(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, v.Manifest.Files, bc.f, func(*schema.Event) error { return nil })
				if err != nil {
					b.Fatal(err)
				}
			}
			sec := b.Elapsed().Seconds() / float64(b.N)
			b.ReportMetric(float64(st.RowsEmitted)/sec, "rows_emitted/s")
			b.ReportMetric(float64(st.RowsRead)/sec, "rows_read/s")
			b.ReportMetric(float64(st.BytesRead), "chunk_bytes/op")
			b.ReportMetric(float64(st.RowGroupsRead), "groups_read/op")
			b.ReportMetric(float64(st.RowGroups), "groups/op")
		})
	}
}
