package summary

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"hash/fnv"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// readLog reads a log of testdata/ through its profile, as the catalog
// does.
func readLog(t testing.TB, dir, file string) (*schema.Profile, []schema.Event) {
	t.Helper()
	pb, err := os.ReadFile(filepath.Join(dir, "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	prof, err := schema.ParseProfile(pb)
	if err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(filepath.Join(dir, file))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rd, err := schema.NewReader(f, prof, schema.ReaderOptions{Name: file})
	if err != nil {
		t.Fatal(err)
	}
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
		if rej == nil {
			e.OccurredAt = e.OccurredAt.Truncate(time.Microsecond).UTC()
			evs = append(evs, e)
		}
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return cases.Less(&a, &b) })
	return prof, evs
}

// caseState runs the per-case pass over evs (grouped by case, in the
// pass's order) with a new accumulator and its process observer as the
// observers, as catalog's pass does, and returns the accumulator.
func caseState(opt Options, evs []schema.Event) *Accumulator {
	a := New(opt)
	b := cases.NewBuilder(a, a.Process())
	b.Terminal = opt.Terminal
	for i := range evs {
		b.Add(&evs[i])
	}
	b.Flush()
	return a
}

// fileStates are event-level states of evs cut into n files by time, as
// catalog keeps per file.
func fileStates(opt Options, evs []schema.Event, n int) []*Accumulator {
	byTime := slices.Clone(evs)
	slices.SortStableFunc(byTime, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	out := make([]*Accumulator, n)
	for i := range out {
		out[i] = New(opt)
	}
	for i := range byTime {
		out[i*n/len(byTime)].Observe(&byTime[i])
	}
	return out
}

func summaryJSON(t testing.TB, a *Accumulator) []byte {
	t.Helper()
	b, err := json.Marshal(a.Summary())
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func recode(t testing.TB, a *Accumulator) *Accumulator {
	t.Helper()
	b, err := a.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	x := New(Options{})
	if err := x.UnmarshalBinary(b); err != nil {
		t.Fatal(err)
	}
	return x
}

// caseGroups cuts evs (in pass order) into k groups of whole cases: by a
// hash of the case key, by contiguous key ranges, at random.
func caseGroups(evs []schema.Event, k int) map[string][][]schema.Event {
	var ids []string
	for _, e := range evs {
		if len(ids) == 0 || ids[len(ids)-1] != e.CaseID {
			ids = append(ids, e.CaseID)
		}
	}
	rank := map[string]int{}
	for i, id := range ids {
		rank[id] = i
	}
	rng := rand.New(rand.NewPCG(uint64(k), 3))
	random := map[string]int{}
	for _, id := range ids {
		random[id] = rng.IntN(k)
	}
	by := map[string]func(string) int{
		"hash": func(id string) int {
			h := fnv.New64a()
			h.Write([]byte(id))
			return int(h.Sum64() % uint64(k))
		},
		"ranges": func(id string) int { return rank[id] * k / len(ids) },
		"random": func(id string) int { return random[id] },
	}
	out := map[string][][]schema.Event{}
	for name, g := range by {
		gs := make([][]schema.Event, k)
		for _, e := range evs {
			gs[g(e.CaseID)] = append(gs[g(e.CaseID)], e)
		}
		out[name] = gs
	}
	return out
}

// merged merges the parts, each encoded and decoded, in several orders.
func merged(t testing.TB, parts []*Accumulator, seed uint64) map[string]*Accumulator {
	t.Helper()
	n := len(parts)
	fold := func(order []int) *Accumulator {
		acc := New(parts[0].opt)
		for _, i := range order {
			if err := acc.Merge(recode(t, parts[i])); err != nil {
				t.Fatal(err)
			}
		}
		return recode(t, acc)
	}
	var tree func(ps []*Accumulator) *Accumulator
	tree = func(ps []*Accumulator) *Accumulator {
		if len(ps) == 1 {
			return recode(t, ps[0])
		}
		l, r := tree(ps[:len(ps)/2]), tree(ps[len(ps)/2:])
		if err := r.Merge(l); err != nil {
			t.Fatal(err)
		}
		return recode(t, r)
	}
	fwd, rev := make([]int, n), make([]int, n)
	for i := range n {
		fwd[i], rev[i] = i, n-1-i
	}
	shuf := slices.Clone(fwd)
	rand.New(rand.NewPCG(seed, 9)).Shuffle(n, func(i, j int) { shuf[i], shuf[j] = shuf[j], shuf[i] })
	return map[string]*Accumulator{"forward": fold(fwd), "reverse": fold(rev), "shuffled": fold(shuf), "tree": tree(parts)}
}

// checkCaseMerges asserts that case-level states of evs's cases cut into
// 2, 3 and 7 groups, merged in any order, give the one-pass summary byte
// for byte, alone and merged with event-level file states (as catalog's
// pass merges them), with the caller's exact counts set on both.
func checkCaseMerges(t *testing.T, opt Options, evs []schema.Event) *Summary {
	t.Helper()
	one := caseState(opt, evs)
	want := summaryJSON(t, one)
	if !bytes.Equal(summaryJSON(t, recode(t, one)), want) {
		t.Fatal("summary changed by a round trip of the state")
	}
	files := fileStates(opt, evs, 3)
	whole := func(caseLevel *Accumulator) []byte {
		acc := New(opt)
		for _, f := range files {
			if err := acc.Merge(recode(t, f)); err != nil {
				t.Fatal(err)
			}
		}
		if err := acc.Merge(caseLevel); err != nil {
			t.Fatal(err)
		}
		acc.SetCounts(Counts{Cases: 11, Subjects: 12, Resources: 13})
		return summaryJSON(t, acc)
	}
	wantWhole := whole(recode(t, one))
	// As catalog's pass does today: the files' states merged, then the
	// per-case pass fed into the same accumulator.
	today := New(opt)
	for _, f := range files {
		if err := today.Merge(recode(t, f)); err != nil {
			t.Fatal(err)
		}
	}
	b := cases.NewBuilder(today, today.Process())
	b.Terminal = opt.Terminal
	for i := range evs {
		b.Add(&evs[i])
	}
	b.Flush()
	today.SetCounts(Counts{Cases: 11, Subjects: 12, Resources: 13})
	if got := summaryJSON(t, today); !bytes.Equal(got, wantWhole) {
		t.Fatalf("files merged then one pass into them differs from files merged with a case-level state\n got %s\nwant %s", around(got, wantWhole), around(wantWhole, got))
	}
	for _, k := range []int{2, 3, 7} {
		for how, gs := range caseGroups(evs, k) {
			parts := make([]*Accumulator, k)
			for i, g := range gs {
				parts[i] = caseState(opt, g)
			}
			for order, m := range merged(t, parts, uint64(k)) {
				if got := summaryJSON(t, m); !bytes.Equal(got, want) {
					t.Fatalf("%d groups by %s, merged %s: summary differs from one pass\n got %s\nwant %s", k, how, order, around(got, want), around(want, got))
				}
				if got := whole(m); !bytes.Equal(got, wantWhole) {
					t.Fatalf("%d groups by %s, merged %s, with file states: summary differs\n got %s\nwant %s", k, how, order, around(got, wantWhole), around(wantWhole, got))
				}
			}
		}
	}
	return one.Summary()
}

// around shows a's bytes near where a and b first differ.
func around(a, b []byte) string {
	i := 0
	for i < len(a) && i < len(b) && a[i] == b[i] {
		i++
	}
	return string(a[max(0, i-150):min(len(a), i+150)])
}

// TestCaseMergeSepsis: the sepsis log (testdata/sepsis, published figures
// in its README) through per-group passes, merged: the one-pass summary,
// 1050 cases and the published mean case duration 2459733.94 s.
func TestCaseMergeSepsis(t *testing.T) {
	prof, evs := readLog(t, "../../testdata/sepsis", "sepsis-cases.csv.gz")
	s := checkCaseMerges(t, Options{Location: prof.Location(), Terminal: prof.Terminal}, evs)
	// README: 1050 cases, mean case duration 2459733.94 s.
	if s.Cases.Value != 1050 || !s.Cases.Exact || s.LengthOfStay.N != 1050 || math.Abs(s.LengthOfStay.Mean-2459733.94) > 0.005 {
		t.Errorf("cases %+v, length of stay n %d mean %.3f; published 1050, 2459733.94 s", s.Cases, s.LengthOfStay.N, s.LengthOfStay.Mean)
	}
	if s.Process == nil || s.Process.DistinctVariant < 100 {
		t.Fatalf("process views %+v", s.Process)
	}
}

// TestCaseMergePatients: the patients log (testdata/patients, figures in
// its README): 500 cases, mean case duration 576832.972 s and the mean
// service time of each activity, merged as in one pass.
func TestCaseMergePatients(t *testing.T) {
	prof, evs := readLog(t, "../../testdata/patients", "patients.csv.gz")
	s := checkCaseMerges(t, Options{Location: prof.Location(), Terminal: prof.Terminal, ExactValues: 100}, evs)
	// README: 500 cases, mean 576832.972 s.
	if s.Cases.Value != 500 || math.Abs(s.LengthOfStay.Mean-576832.972) > 5e-4 {
		t.Errorf("cases %+v, length of stay mean %.4f; README 500, 576832.972 s", s.Cases, s.LengthOfStay.Mean)
	}
	// README: mean service time by activity instance, seconds (n, mean).
	readme := map[string]struct {
		n    uint64
		mean float64
	}{
		"Blood test": {237, 19928.802}, "Check-out": {492, 7426.417}, "Discuss Results": {495, 9992.733},
		"MRI SCAN": {236, 14939.169}, "Registration": {500, 9913.680}, "Triage and Assessment": {500, 47179.796},
		"X-Ray": {261, 17445.724},
	}
	if len(s.Activities) != len(readme) {
		t.Fatalf("%d activities, README %d", len(s.Activities), len(readme))
	}
	for _, a := range s.Activities {
		w := readme[a.Name]
		if a.Service.N != w.n || math.Abs(a.Service.Mean-w.mean) > 5e-4 {
			t.Errorf("%s: service n %d mean %.4f; README %d, %.3f", a.Name, a.Service.N, a.Service.Mean, w.n, w.mean)
		}
	}
}

// genEvents makes n cases at three sites with queues, services, abandons,
// departures, resources and idles of 40 and 400 days.
func genEvents(seed uint64, n int) []schema.Event {
	rng := rand.New(rand.NewPCG(seed, 2))
	acts := []string{"assess", "treat", "scan", "review"}
	t0 := time.Date(2025, 1, 6, 7, 0, 0, 0, time.UTC)
	var evs []schema.Event
	for range n {
		id := fmt.Sprintf("c%08x", rng.Uint32())
		site := []string{"harbour", "hill", "mill"}[rng.IntN(3)]
		at := t0.Add(time.Duration(rng.Int64N(200*24*3600)) * time.Second)
		add := func(tp schema.EventType, act, q string) {
			e := schema.Event{Site: site, CaseID: id, Type: tp, Activity: act, Queue: q, OccurredAt: at,
				SubjectID: "s" + id[:4]}
			if rng.IntN(2) == 0 {
				e.ResourceID = fmt.Sprintf("r%d", rng.IntN(9))
			}
			evs = append(evs, e)
			switch r := rng.IntN(50); {
			case r == 0:
				at = at.Add(40 * 24 * time.Hour)
			case r == 1:
				at = at.Add(400 * 24 * time.Hour)
			case r < 5:
			default:
				at = at.Add(time.Duration(1+rng.IntN(5400)) * time.Second)
			}
		}
		add(schema.Arrival, "", "")
		for range 1 + rng.IntN(5) {
			act, q := acts[rng.IntN(len(acts))], []string{"front", "back"}[rng.IntN(2)]
			add(schema.Enqueue, act, q)
			if rng.IntN(10) == 0 {
				add(schema.Abandon, act, q)
				break
			}
			add(schema.Start, act, q)
			add(schema.Complete, act, q)
		}
		if rng.IntN(4) > 0 {
			add(schema.Departure, "", "")
		}
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return cases.Less(&a, &b) })
	return evs
}

// TestCaseMergeGenerated: generated logs, with distributions that
// collapse to buckets in some groups and not others, and with every
// process view past its cap, merge to the one-pass summary byte for byte.
func TestCaseMergeGenerated(t *testing.T) {
	evs := genEvents(1, 2000)
	s := checkCaseMerges(t, Options{ExactValues: 300}, evs)
	if s.LengthOfStay.Exact || len(s.Queues) < 2 || s.Process.DistinctVariant < 50 {
		t.Fatalf("generated log too plain: length of stay exact %v, %d queues, %d variants", s.LengthOfStay.Exact, len(s.Queues), s.Process.DistinctVariant)
	}
	// Caps lowered so that each view keeps only part of its keys.
	defer func(f, v, w, h int) { maxFollows, maxVariants, maxWorkload, maxHandovers = f, v, w, h }(maxFollows, maxVariants, maxWorkload, maxHandovers)
	maxFollows, maxVariants, maxWorkload, maxHandovers = 7, 25, 40, 11
	s = checkCaseMerges(t, Options{}, genEvents(2, 600))
	p := s.Process
	if p.OtherFollows == 0 || p.OtherVariants == 0 || p.OtherWorkload == 0 || p.OtherHandovers == 0 ||
		len(p.DirectlyFollows) != 7 || p.DistinctVariant != 25 || len(p.Workload) != 40 || len(p.Handovers) != 11 {
		t.Fatalf("caps not reached: %d pairs (+%d), %d variants (+%d), %d cells (+%d), %d handovers (+%d)",
			len(p.DirectlyFollows), p.OtherFollows, p.DistinctVariant, p.OtherVariants, len(p.Workload), p.OtherWorkload, len(p.Handovers), p.OtherHandovers)
	}
	// Every case and event is counted once, told apart or not.
	var cs uint64
	for _, v := range p.Variants {
		cs += v.Cases
	}
	if p.OtherVariants+uint64(len(p.Variants)) > 600 || cs+p.OtherVariants > 600 {
		t.Errorf("variants: %d listed cases and %d others of 600", cs, p.OtherVariants)
	}
	// Byte budgets lowered (the counts left high), as long free text
	// mapped to activity reaches them: the views keep the keys of lowest
	// rank within the bytes, and still merge to the one-pass summary.
	maxFollows, maxVariants = 1000, 1000
	defer func(f, v int) { maxFollowBytes, maxVariantBytes = f, v }(maxFollowBytes, maxVariantBytes)
	maxFollowBytes, maxVariantBytes = 40, 200
	s = checkCaseMerges(t, Options{}, genEvents(5, 600))
	p = s.Process
	var fb int
	for _, f := range p.DirectlyFollows {
		fb += len(f.From) + len(f.To)
	}
	if p.OtherFollows == 0 || p.OtherVariants == 0 || fb > 40 || len(p.DirectlyFollows) == 0 || p.DistinctVariant == 0 {
		t.Fatalf("byte budgets not reached: %d pairs of %d bytes (+%d), %d variants (+%d)", len(p.DirectlyFollows), fb, p.OtherFollows, p.DistinctVariant, p.OtherVariants)
	}
	// One case per group for a small log.
	small := genEvents(3, 30)
	want := summaryJSON(t, caseState(Options{}, small))
	var parts []*Accumulator
	for i := 0; i < len(small); {
		j := i
		for j < len(small) && small[j].CaseID == small[i].CaseID {
			j++
		}
		parts = append(parts, caseState(Options{}, small[i:j]))
		i = j
	}
	if len(parts) != 30 {
		t.Fatalf("%d single-case parts", len(parts))
	}
	for order, m := range merged(t, parts, 30) {
		if got := summaryJSON(t, m); !bytes.Equal(got, want) {
			t.Errorf("one case per group, merged %s: summary differs\n got %s\nwant %s", order, around(got, want), around(want, got))
		}
	}
}

// TestStateFormats: a state without process views is still written and
// read as format 4 (the states of files and of earlier releases), one
// with them as format 5; every truncation and a corrupt count fail with
// ErrCorrupt.
func TestStateFormats(t *testing.T) {
	evs := genEvents(4, 40)
	ev := New(Options{})
	for i := range evs {
		ev.Observe(&evs[i])
	}
	b4, err := ev.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	if string(b4[:6]) != "FCSUM\x04" {
		t.Fatalf("event-level state begins %q, want format 4", b4[:6])
	}
	if recode(t, ev).process != nil {
		t.Error("a format-4 state decoded with process views")
	}
	cs := caseState(Options{}, evs)
	b5, err := cs.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	if string(b5[:6]) != "FCSUM\x05" || recode(t, cs).process == nil {
		t.Fatalf("case-level state begins %q, want format 5 with process views", b5[:6])
	}
	for n := range len(b5) {
		if err := New(Options{}).UnmarshalBinary(b5[:n]); !errors.Is(err, ErrCorrupt) {
			t.Fatalf("state cut to %d of %d bytes: %v", n, len(b5), err)
		}
	}
	bad := append(slices.Clone(b5[:len(b5)-1]), 0x80) // an unfinished varint
	if err := New(Options{}).UnmarshalBinary(bad); !errors.Is(err, ErrCorrupt) {
		t.Errorf("corrupt last byte: %v, want ErrCorrupt", err)
	}
	if err := New(Options{}).UnmarshalBinary(append(slices.Clone(b5), 1)); !errors.Is(err, ErrCorrupt) {
		t.Errorf("trailing byte: %v, want ErrCorrupt", err)
	}
}

// FuzzSummaryState: UnmarshalBinary never panics; a state it takes
// encodes and merges. (Summary is left out: a fuzzed state may claim an
// observed stretch of millions of years, whose hours Summary counts one
// by one.)
func FuzzSummaryState(f *testing.F) {
	evs := genEvents(5, 6)
	for _, a := range []*Accumulator{caseState(Options{}, evs), fileStates(Options{}, evs, 1)[0]} {
		b, err := a.MarshalBinary()
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		a := New(Options{})
		if err := a.UnmarshalBinary(b); err != nil {
			return
		}
		if _, err := a.MarshalBinary(); err != nil {
			t.Fatal(err)
		}
		m := New(a.opt)
		if err := m.Merge(a); err != nil {
			t.Fatal(err)
		}
	})
}
