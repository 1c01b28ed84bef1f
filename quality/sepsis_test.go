package quality

import (
	"compress/gzip"
	"encoding/csv"
	"errors"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

const sepsisDir = "../testdata/sepsis"

// TestSepsis reads the public sepsis log as the catalog does and checks
// the detected resolution and the same-instant count against values
// computed here independently, with the standard library only.
func TestSepsis(t *testing.T) {
	pb, err := os.ReadFile(filepath.Join(sepsisDir, "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	prof, err := schema.ParseProfile(pb)
	if err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(filepath.Join(sepsisDir, "sepsis-cases.csv.gz"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rd, err := schema.NewReader(f, prof, schema.ReaderOptions{Name: "sepsis"})
	if err != nil {
		t.Fatal(err)
	}
	acc := NewAccumulator(Options{Zone: prof.Location(), UploadedAt: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)})
	var evs []schema.Event
	for {
		var e schema.Event
		rej, err := rd.Next(&e)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		if rej != nil {
			acc.Reject(*rej)
			continue
		}
		e.OccurredAt = e.OccurredAt.Truncate(time.Microsecond).UTC()
		acc.ObserveFileOrder(&e)
		evs = append(evs, e)
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	acc.ObserveSorted(evs)
	r := acc.Report()

	// Resolution from the raw column, read with time.Parse in the log's
	// zone: the coarsest grid every wall-clock time sits on.
	want, onGrid, total := rawResolution(t)
	if r.Resolution.Grid != want {
		t.Errorf("resolution %s, want %s", r.Resolution.Grid, want)
	}
	// Heaping, by the rule of SCORING.md, from the same reading: for the
	// grids minute to hour coarser than the resolution (seconds here), the
	// share of events on the grid against 1 s / grid expected.
	grids := []struct {
		name string
		i    int
		secs float64
	}{{"minute", 2, 60}, {"5_minutes", 3, 300}, {"15_minutes", 4, 900}, {"hour", 5, 3600}}
	if want != "second" || len(r.Resolution.Heaping) != len(grids) {
		t.Fatalf("resolution %s, heaping %+v", want, r.Resolution.Heaping)
	}
	for k, g := range grids {
		h := r.Resolution.Heaping[k]
		share, expected := float64(onGrid[g.i])/float64(total), 1/g.secs
		heaped := share >= 2*expected && share-expected > 0.05
		if h.Grid != g.name || h.Events != onGrid[g.i] || h.Heaped != heaped {
			t.Errorf("heaping %+v, standard library %s: %d events (%.4f, expected %.5f), heaped %v", h, g.name, onGrid[g.i], share, expected, heaped)
		}
	}
	// The millisecond field is always .000 (README), so at least seconds.
	if r.Resolution.Grid == "microsecond" || r.Resolution.Grid == "millisecond" {
		t.Errorf("resolution %s, want seconds or coarser", r.Resolution.Grid)
	}

	// Same-instant events within a case: per (case, instant), the
	// distinct events (exact copies count once) beyond the first.
	groups := map[[2]string]map[schema.Event]bool{}
	var exact int64
	for _, e := range evs {
		e.Line = 0
		k := [2]string{e.CaseID, e.OccurredAt.Format(time.RFC3339Nano)}
		if groups[k] == nil {
			groups[k] = map[schema.Event]bool{}
		}
		if groups[k][e] {
			exact++
		}
		groups[k][e] = true
	}
	var same int64
	for _, g := range groups {
		same += int64(len(g) - 1)
	}
	if got := r.Count(CodeSameInstant); got != same || same == 0 {
		t.Errorf("same_instant %d, want %d", got, same)
	}
	if got := r.Count(CodeExactDuplicate); got != exact {
		t.Errorf("exact_duplicate %d, want %d", got, exact)
	}
	// Duplicates keyed on case, type, activity and instant: per such key,
	// the distinct events (exact copies count once) beyond the first. On
	// this log of completions, different steps at one instant are not
	// duplicates.
	dupGroups := map[[4]string]map[schema.Event]bool{}
	for _, e := range evs {
		e.Line = 0
		k := [4]string{e.CaseID, string(e.Type), e.Activity, e.OccurredAt.Format(time.RFC3339Nano)}
		if dupGroups[k] == nil {
			dupGroups[k] = map[schema.Event]bool{}
		}
		dupGroups[k][e] = true
	}
	var dups int64
	for _, g := range dupGroups {
		dups += int64(len(g) - 1)
	}
	if got := r.Count(CodeDuplicateCaseTypeTime); got != dups || dups >= same {
		t.Errorf("duplicate_case_type_time %d, standard library %d (same instant %d)", got, dups, same)
	}
	t.Logf("sepsis: %d same-instant events, %d duplicates by case, type, activity and instant, %d exact copies", same, dups, exact)
	// Only completes: no order conflicts, no arrivals, no waits.
	if r.Count(CodeSameInstantOrder) != 0 || r.Stages.Arrival != 0 || len(r.Waits) != 0 {
		t.Errorf("order conflicts %d, stages %+v, waits %v", r.Count(CodeSameInstantOrder), r.Stages, r.Waits)
	}
	// No case leaves, so the text shows no census figures for Little's law.
	var txt strings.Builder
	if err := r.Text(&txt, false); err != nil {
		t.Fatal(err)
	}
	if !regexp.MustCompile(`(?m)^sepsis\s+-\s+-\s+-\s+not judged: no case leaves`).MatchString(txt.String()) {
		t.Errorf("Little's law row of a log where nothing leaves:\n%s", txt.String())
	}
	// 1050 cases (the log's published figure, README); cases longer than
	// 30 days, counted here.
	first, last := map[string]time.Time{}, map[string]time.Time{}
	for _, e := range evs {
		if _, ok := first[e.CaseID]; !ok {
			first[e.CaseID] = e.OccurredAt
		}
		last[e.CaseID] = e.OccurredAt
	}
	var long int64
	for c := range first {
		if last[c].Sub(first[c]) > DefaultMaxCase {
			long++
		}
	}
	if got := r.Count(CodeCaseTooLong); got != long {
		t.Errorf("case_too_long %d, want %d", got, long)
	}
	// Where to look: a case-level finding is located by its cases'
	// pseudonyms (here the raw ids), each one of the long cases.
	for _, d := range r.Dimensions {
		for _, f := range d.Findings {
			if f.Code != CodeCaseTooLong {
				continue
			}
			for _, smp := range f.Samples {
				if last[smp.CaseID].Sub(first[smp.CaseID]) <= DefaultMaxCase {
					t.Errorf("case_too_long sample %q is not a long case", smp.CaseID)
				}
			}
			if len(f.Samples) == 0 || !strings.Contains(txt.String(), "case_too_long: cases "+f.Samples[0].CaseID) {
				t.Errorf("where to look does not name the long cases:\n%s", txt.String())
			}
		}
	}
	if r.Stages.Cases != 1050 {
		t.Errorf("%d cases, want 1050", r.Stages.Cases)
	}
	// The file is grouped by case, so the clock is not judged.
	if r.Count(CodeClockBackwards) != 0 || r.Count(CodeFileNotTimeOrdered) == 0 {
		t.Errorf("clock_backwards %d, file_not_time_ordered %d", r.Count(CodeClockBackwards), r.Count(CodeFileNotTimeOrdered))
	}
	t.Logf("sepsis: score %v, resolution %s, same_instant %d, rows %+v", *r.Score, r.Resolution.Grid, same, r.Rows)
}

func rawResolution(t *testing.T) (string, [7]int64, int64) {
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(filepath.Join(sepsisDir, "sepsis-cases.csv.gz"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	cr := csv.NewReader(zr)
	cr.Comma = ';'
	head, err := cr.Read()
	if err != nil {
		t.Fatal(err)
	}
	col := slices.Index(head, "Complete Timestamp")
	// on[g]: every time so far sits on grid g (ms, s, min, 5 min, 15 min, hour, day).
	on := [7]bool{true, true, true, true, true, true, true}
	var count [7]int64 // events on each grid
	var total int64
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		tm, err := time.ParseInLocation("2006/01/02 15:04:05.000", rec[col], ams)
		if err != nil {
			continue // the reader rejects it too
		}
		ns, s, m, h := tm.Nanosecond(), tm.Second(), tm.Minute(), tm.Hour()
		conds := [7]bool{ns%1e6 == 0, ns == 0, ns == 0 && s == 0, ns == 0 && s == 0 && m%5 == 0,
			ns == 0 && s == 0 && m%15 == 0, ns == 0 && s == 0 && m == 0, ns == 0 && s == 0 && m == 0 && h == 0}
		total++
		for i := range on {
			on[i] = on[i] && conds[i]
			if conds[i] {
				count[i]++
			}
		}
	}
	names := []string{"millisecond", "second", "minute", "5_minutes", "15_minutes", "hour", "day"}
	res := "microsecond"
	for i := range on {
		if on[i] {
			res = names[i]
		}
	}
	return res, count, total
}
