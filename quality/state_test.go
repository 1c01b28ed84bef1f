package quality

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
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// readLog reads a log of testdata/ through its profile, as the catalog
// does, with its source lines.
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
		if rej != nil {
			continue
		}
		e.OccurredAt = e.OccurredAt.Truncate(time.Microsecond).UTC()
		evs = append(evs, e)
	}
	return prof, evs
}

// casePassInput returns evs as the per-case pass takes them: each event's
// flags from a time pass packed into its line, then grouped by case in
// the pass's order (cases.Less).
func casePassInput(evs []schema.Event, opt Options) []schema.Event {
	evs = slices.Clone(evs)
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	tp := NewAccumulator(opt)
	for i := range evs {
		fl := tp.Observe(&evs[i])
		evs[i].Line = PackLine(evs[i].Line, fl)
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return cases.Less(&a, &b) })
	return evs
}

// observeCases runs the per-case pass over evs (in pass order) with one
// accumulator as its observer, as catalog's passVersion does.
func observeCases(opt Options, evs []schema.Event) *Accumulator {
	a := NewAccumulator(opt)
	b := cases.NewBuilder(a)
	b.Terminal = opt.Terminal
	for i := range evs {
		e := evs[i]
		b.Add(&e)
	}
	b.Flush()
	return a
}

func reportJSON(t testing.TB, a *Accumulator) []byte {
	t.Helper()
	b, err := json.Marshal(a.Report())
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// split cuts the events (in pass order) into groups by the group each
// case is given; the cases of a group keep their pass order.
func split(evs []schema.Event, group func(caseID string) int, n int) [][]schema.Event {
	out := make([][]schema.Event, n)
	for _, e := range evs {
		g := group(e.CaseID)
		out[g] = append(out[g], e)
	}
	return out
}

// groupings are the ways cases are cut into k disjoint groups: by a hash
// of the case key, by contiguous ranges of keys, and at random.
func groupings(evs []schema.Event, k int, seed uint64) map[string]func(string) int {
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
	rng := rand.New(rand.NewPCG(seed, uint64(k)))
	random := map[string]int{}
	for _, id := range ids {
		random[id] = rng.IntN(k)
	}
	return map[string]func(string) int{
		"hash": func(id string) int {
			h := fnv.New64a()
			h.Write([]byte(id))
			return int(h.Sum64() % uint64(k))
		},
		"ranges": func(id string) int { return rank[id] * k / len(ids) },
		"random": func(id string) int { return random[id] },
	}
}

// roundTrip encodes a's state and decodes it into a new accumulator.
func roundTrip(t testing.TB, a *Accumulator, opt Options) *Accumulator {
	t.Helper()
	b, err := a.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	d := NewAccumulator(opt)
	if err := d.UnmarshalBinary(b); err != nil {
		t.Fatal(err)
	}
	return d
}

// mergeOrders merges the group states in several orders and groupings,
// each part encoded and decoded first, and returns each result by name.
func mergeOrders(t testing.TB, parts []*Accumulator, opt Options, seed uint64) map[string]*Accumulator {
	t.Helper()
	decoded := make([]*Accumulator, len(parts))
	for i, p := range parts {
		decoded[i] = roundTrip(t, p, opt)
	}
	fold := func(order []int) *Accumulator {
		acc := NewAccumulator(opt)
		for _, i := range order {
			if err := acc.Merge(roundTrip(t, decoded[i], opt)); err != nil {
				t.Fatal(err)
			}
		}
		return acc
	}
	var tree func(ps []*Accumulator) *Accumulator
	tree = func(ps []*Accumulator) *Accumulator {
		if len(ps) == 1 {
			return roundTrip(t, ps[0], opt)
		}
		l, r := tree(ps[:len(ps)/2]), tree(ps[len(ps)/2:])
		if err := r.Merge(l); err != nil { // right into left's complement: another order
			t.Fatal(err)
		}
		return roundTrip(t, r, opt)
	}
	n := len(parts)
	fwd, rev := make([]int, n), make([]int, n)
	for i := range n {
		fwd[i], rev[i] = i, n-1-i
	}
	shuf := slices.Clone(fwd)
	rand.New(rand.NewPCG(seed, 7)).Shuffle(n, func(i, j int) { shuf[i], shuf[j] = shuf[j], shuf[i] })
	// Into the first part itself, not into an empty accumulator.
	first := roundTrip(t, decoded[0], opt)
	for _, p := range decoded[1:] {
		if err := first.Merge(p); err != nil {
			t.Fatal(err)
		}
	}
	return map[string]*Accumulator{"forward": fold(fwd), "reverse": fold(rev), "shuffled": fold(shuf), "tree": tree(decoded), "into first": first}
}

// checkMerges asserts that, for every grouping of evs' cases into 2, 3
// and 7 groups and every merge order, the merged report and state equal
// those of one pass, byte for byte.
func checkMerges(t *testing.T, opt Options, evs []schema.Event) *Accumulator {
	t.Helper()
	one := observeCases(opt, evs)
	want := reportJSON(t, one)
	wantState, err := one.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(reportJSON(t, roundTrip(t, one, opt)), want) {
		t.Fatal("report of the decoded state differs from the one-pass report")
	}
	for _, k := range []int{2, 3, 7} {
		for name, g := range groupings(evs, k, uint64(k)) {
			groups := split(evs, g, k)
			parts := make([]*Accumulator, k)
			for i, ge := range groups {
				parts[i] = observeCases(opt, ge)
			}
			for order, m := range mergeOrders(t, parts, opt, uint64(k)) {
				if got := reportJSON(t, m); !bytes.Equal(got, want) {
					t.Fatalf("%d groups by %s, merged %s: report differs from one pass\n got %s\nwant %s", k, name, order, firstDiff(got, want), firstDiff(want, got))
				}
				st, err := m.MarshalBinary()
				if err != nil {
					t.Fatal(err)
				}
				if !bytes.Equal(st, wantState) {
					t.Errorf("%d groups by %s, merged %s: state bytes differ from one pass", k, name, order)
				}
			}
		}
	}
	return one
}

// firstDiff shows a's bytes around where a and b first differ.
func firstDiff(a, b []byte) string {
	i := 0
	for i < len(a) && i < len(b) && a[i] == b[i] {
		i++
	}
	return string(a[max(0, i-120):min(len(a), i+120)])
}

// TestMergeSepsis: the sepsis log (testdata/sepsis, published figures in
// its README) through per-group case passes, merged, gives the one-pass
// report byte for byte, and the published figures: 1050 cases, mean case
// duration 2459733.94 s.
func TestMergeSepsis(t *testing.T) {
	prof, evs := readLog(t, sepsisDir, "sepsis-cases.csv.gz")
	opt := Options{Zone: prof.Location(), Terminal: prof.Terminal}
	in := casePassInput(evs, opt)
	one := checkMerges(t, opt, in)
	r := one.Report()
	// README: 1050 cases, mean case duration 2459733.94 s.
	if r.Cases.Count != 1050 || math.Abs(r.Cases.MeanDurationSeconds-2459733.94) > 0.005 {
		t.Errorf("cases %+v; published 1050, mean 2459733.94 s", r.Cases)
	}
	// The census of a log where no case leaves: every stay is open to
	// the site's last event; recomputed here from the events.
	first, last := map[string]int64{}, map[string]int64{}
	var siteLast int64
	for _, e := range evs {
		at := e.OccurredAt.UnixMicro()
		if f, ok := first[e.CaseID]; !ok || at < f {
			first[e.CaseID] = at
		}
		last[e.CaseID] = max(last[e.CaseID], at)
		siteLast = max(siteLast, at)
	}
	var area, stayed int64
	for c, f := range first {
		area += siteLast - f
		stayed += last[c] - f
	}
	c := r.Raw.Sites[0].Census
	if c.AreaCaseSeconds != float64(area)/1e6 || c.StayedSeconds != float64(stayed)/1e6 || c.Entries != 1050 || c.Exits != 0 {
		t.Errorf("census %+v; standard library: area %d µs, stays %d µs, 1050 entries", c, area, stayed)
	}
}

// TestMergePatients: the patients log (testdata/patients, figures in its
// README): 500 cases, mean case duration 576832.972 s, maximum
// 1996424 s, merged as in one pass.
func TestMergePatients(t *testing.T) {
	prof, evs := readLog(t, "../testdata/patients", "patients.csv.gz")
	opt := Options{Zone: prof.Location(), Terminal: prof.Terminal, MaxSamples: 3}
	in := casePassInput(evs, opt)
	r := checkMerges(t, opt, in).Report()
	// README: 500 cases, mean 576832.972 s, max 1996424.0 s.
	if r.Cases.Count != 500 || math.Abs(r.Cases.MeanDurationSeconds-576832.972) > 5e-4 || r.Cases.MaxDurationSeconds != 1996424 {
		t.Errorf("cases %+v; README 500, mean 576832.972 s, max 1996424 s", r.Cases)
	}
}

// genLog makes a log of n cases at several sites, with waits, services,
// abandons, transfers, departures, open stays, idles of 40 and 400 days,
// events at one instant, copies and events without a source line (as
// read back from a stored file).
func genLog(seed uint64, n int) []schema.Event {
	rng := rand.New(rand.NewPCG(seed, 1))
	sites := []string{"north", "south", "east", "west"}
	queues := []string{"triage", "desk", ""}
	acts := []string{"assess", "treat", "scan"}
	t0 := time.Date(2025, 3, 1, 8, 0, 0, 0, time.UTC)
	var evs []schema.Event
	for c := range n {
		id := fmt.Sprintf("k%08x", rng.Uint32())
		if c%17 == 0 {
			id = fmt.Sprintf("k%08x", c) // some keys close together
		}
		site := sites[rng.IntN(len(sites))]
		at := t0.Add(time.Duration(rng.IntN(90*24*3600)) * time.Second)
		add := func(tp schema.EventType, act, q string) {
			e := schema.Event{Site: site, CaseID: id, Type: tp, Activity: act, Queue: q, OccurredAt: at}
			if rng.IntN(3) == 0 {
				e.ResourceID = fmt.Sprintf("r%d", rng.IntN(5))
			}
			evs = append(evs, e)
			if rng.IntN(25) == 0 {
				evs = append(evs, e) // a copy
			}
		}
		step := func() {
			switch r := rng.IntN(40); {
			case r == 0:
				at = at.Add(40 * 24 * time.Hour)
			case r == 1:
				at = at.Add(400 * 24 * time.Hour)
			case r < 8:
				// the same instant
			default:
				at = at.Add(time.Duration(1+rng.IntN(7200)) * time.Second)
			}
		}
		if rng.IntN(5) > 0 {
			add(schema.Arrival, "", "")
			step()
		}
		for s := range 1 + rng.IntN(4) {
			q, act := queues[rng.IntN(len(queues))], acts[rng.IntN(len(acts))]
			if rng.IntN(4) > 0 {
				add(schema.Enqueue, act, q)
				step()
			}
			if rng.IntN(12) == 0 {
				add(schema.Abandon, act, q)
				step()
				break
			}
			if rng.IntN(10) > 0 {
				add(schema.Start, act, q)
				step()
			}
			if rng.IntN(10) > 0 {
				add(schema.Complete, act, q)
				step()
			}
			if s == 1 && rng.IntN(6) == 0 {
				add(schema.Transfer, "", "")
				step()
				site = sites[rng.IntN(len(sites))]
				add(schema.Arrival, "", "")
				step()
			}
		}
		if rng.IntN(10) < 7 {
			add(schema.Departure, "", "")
		}
		if rng.IntN(20) == 0 {
			add(schema.Complete, acts[0], "") // after departure
		}
	}
	// File order: shuffled; a third read back from stored files (no line).
	rng.Shuffle(len(evs), func(i, j int) { evs[i], evs[j] = evs[j], evs[i] })
	for i := range evs {
		if rng.IntN(3) > 0 {
			evs[i].Line = int64(i + 2)
		}
	}
	return evs
}

// TestMergeGenerated: generated logs of several shapes, cut into 2, 3 and
// 7 groups (and, for a small one, one case per group), merge to the
// one-pass report and state byte for byte.
func TestMergeGenerated(t *testing.T) {
	for _, tc := range []struct {
		seed uint64
		n    int
		opt  Options
	}{
		{1, 400, Options{MaxCase: 10 * 24 * time.Hour, MaxSamples: 2}},
		{2, 1500, Options{MaxService: map[string]time.Duration{"": time.Hour, "scan": 10 * time.Minute}}},
		{3, 300, Options{Terminal: []schema.EventType{schema.Transfer}, MaxSamples: 7}},
	} {
		t.Run(fmt.Sprint(tc.seed), func(t *testing.T) {
			in := casePassInput(genLog(tc.seed, tc.n), tc.opt)
			one := checkMerges(t, tc.opt, in)
			r := one.Report()
			if len(r.Raw.Sites) != 4 || len(r.Raw.Waits) == 0 || r.Cases.Count != int64(tc.n) {
				t.Fatalf("generated log too plain: %d sites, %d waits, %d cases", len(r.Raw.Sites), len(r.Raw.Waits), r.Cases.Count)
			}
			var exits, open int64
			for _, s := range r.Raw.Sites {
				exits += s.Census.Exits
				open += s.Census.Entries - s.Census.Exits
			}
			if exits == 0 || open == 0 || len(r.Raw.Samples) < 5 {
				t.Errorf("generated log too plain: %d exits, %d open stays, samples of %d findings", exits, open, len(r.Raw.Samples))
			}
		})
	}
	// One case per group.
	opt := Options{MaxSamples: 2}
	in := casePassInput(genLog(9, 40), opt)
	want := reportJSON(t, observeCases(opt, in))
	var parts []*Accumulator
	for _, g := range split(in, func(string) int { return 0 }, 1)[0:1] {
		for i := 0; i < len(g); {
			j := i
			for j < len(g) && g[j].CaseID == g[i].CaseID {
				j++
			}
			parts = append(parts, observeCases(opt, g[i:j]))
			i = j
		}
	}
	if len(parts) != 40 {
		t.Fatalf("%d single-case parts, want 40", len(parts))
	}
	for order, m := range mergeOrders(t, parts, opt, 40) {
		if got := reportJSON(t, m); !bytes.Equal(got, want) {
			t.Errorf("one case per group, merged %s: report differs\n got %s\nwant %s", order, firstDiff(got, want), firstDiff(want, got))
		}
	}
}

// TestStateErrors: a truncated, corrupt or foreign state and a merge of
// accumulators that are not case-level give named errors and leave the
// receiver unchanged.
func TestStateErrors(t *testing.T) {
	opt := Options{MaxSamples: 3}
	a := observeCases(opt, casePassInput(genLog(4, 50), opt))
	st, err := a.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	want := reportJSON(t, a)
	for name, b := range map[string][]byte{
		"empty":      nil,
		"magic":      append([]byte("FCQX"), st[4:]...),
		"version":    append(append([]byte("FCQS"), 9), st[5:]...),
		"truncated":  st[:len(st)/2],
		"one short":  st[:len(st)-1],
		"trailing":   append(slices.Clone(st), 0),
		"huge count": append(slices.Clone(st[:5+len(a.fingerprint())]), 0xff, 0xff, 0xff, 0xff, 0x0f),
	} {
		d := roundTrip(t, a, opt)
		err := d.UnmarshalBinary(b)
		if !errors.Is(err, ErrState) {
			t.Errorf("%s: error %v, want ErrState", name, err)
		}
		if got := reportJSON(t, d); !bytes.Equal(got, want) {
			t.Errorf("%s: a failed decode changed the accumulator", name)
		}
	}
	// Every truncation fails with ErrState (none panics or passes).
	for n := range len(st) {
		if err := NewAccumulator(opt).UnmarshalBinary(st[:n]); !errors.Is(err, ErrState) {
			t.Fatalf("state cut to %d of %d bytes: %v", n, len(st), err)
		}
	}
	// Other case-level options.
	if err := NewAccumulator(Options{MaxSamples: 4}).UnmarshalBinary(st); !errors.Is(err, ErrStateOptions) {
		t.Errorf("decode with other options: %v, want ErrStateOptions", err)
	}
	if err := NewAccumulator(Options{MaxSamples: 4}).Merge(a); !errors.Is(err, ErrStateOptions) {
		t.Errorf("merge with other options: %v, want ErrStateOptions", err)
	}
	// Options the case pass does not use may differ (a later night's
	// upload instant).
	if err := NewAccumulator(Options{MaxSamples: 3, UploadedAt: time.Now()}).UnmarshalBinary(st); err != nil {
		t.Errorf("decode with another upload instant: %v", err)
	}
	// An accumulator of the time pass holds more than case-level state.
	tp := NewAccumulator(opt)
	tp.ObserveSorted(genLog(4, 5))
	if _, err := tp.MarshalBinary(); !errors.Is(err, ErrNotCaseLevel) {
		t.Errorf("marshal of a time-pass accumulator: %v, want ErrNotCaseLevel", err)
	}
	if err := roundTrip(t, a, opt).Merge(tp); !errors.Is(err, ErrNotCaseLevel) {
		t.Errorf("merge of a time-pass accumulator: %v, want ErrNotCaseLevel", err)
	}
}

// FuzzQualityState: UnmarshalBinary never panics and fails only with
// ErrState or ErrStateOptions; a state it takes encodes again, reports
// and merges.
func FuzzQualityState(f *testing.F) {
	opt := Options{MaxSamples: 3}
	for _, seed := range []uint64{5, 6} {
		st, err := observeCases(opt, casePassInput(genLog(seed, 8), opt)).MarshalBinary()
		if err != nil {
			f.Fatal(err)
		}
		f.Add(st)
	}
	f.Add([]byte("FCQS\x01"))
	f.Fuzz(func(t *testing.T, b []byte) {
		a := NewAccumulator(opt)
		if err := a.UnmarshalBinary(b); err != nil {
			if !errors.Is(err, ErrState) && !errors.Is(err, ErrStateOptions) {
				t.Fatalf("error %v is neither ErrState nor ErrStateOptions", err)
			}
			return
		}
		if _, err := a.MarshalBinary(); err != nil {
			t.Fatal(err)
		}
		_ = a.Report()
		if err := NewAccumulator(opt).Merge(a); err != nil {
			t.Fatal(err)
		}
	})
}

// TestMergeKeepsKeysBound: parts that tell apart more (queue, activity)
// pairs together than one pass may (maxKeys) merge into at most maxKeys
// of them, the first part's all kept, and the merged state decodes again
// (its decoder refuses more). Before, merged parts held every pair, so a
// version made of many parts grew its report with the file.
func TestMergeKeepsKeysBound(t *testing.T) {
	opt := Options{}
	part := func(off int) *Accumulator {
		var evs []schema.Event
		at := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
		for i := range 40000 {
			c := fmt.Sprintf("c%d", off+i)
			act := fmt.Sprintf("a%d", off+i)
			evs = append(evs,
				schema.Event{Site: "north", CaseID: c, Type: schema.Enqueue, Queue: "q", Activity: act, OccurredAt: at, Line: int64(2 * i)},
				schema.Event{Site: "north", CaseID: c, Type: schema.Start, Queue: "q", Activity: act, OccurredAt: at.Add(time.Minute), Line: int64(2*i + 1)})
		}
		return observeCases(opt, casePassInput(evs, opt))
	}
	a, b := part(0), part(30000) // 70,000 pairs, 10,000 in both
	if len(a.waits) != 40000 || len(b.waits) != 40000 {
		t.Fatalf("parts of %d and %d pairs", len(a.waits), len(b.waits))
	}
	if err := a.Merge(b); err != nil {
		t.Fatal(err)
	}
	if len(a.waits) != maxKeys {
		t.Errorf("merged %d pairs, want %d", len(a.waits), maxKeys)
	}
	for i := range 40000 {
		if _, ok := a.waitIndex[waitKey{"q", fmt.Sprintf("a%d", i)}]; !ok {
			t.Fatalf("the first part's pair a%d was dropped", i)
		}
	}
	// The second part's pairs beyond the cap (a65536..a69999) are not
	// told apart but still counted: 80,000 waits in all.
	if b := a.waitsBeyond; b.waits != 70000-maxKeys || b.noStart != 0 {
		t.Errorf("waits beyond the cap %+v, want %d", b, 70000-maxKeys)
	}
	r := a.Report()
	var listed int64
	for _, w := range r.Raw.Waits {
		listed += w.Waits
	}
	if f := r.Raw.WaitsFolded; f == nil || !f.MorePairs || !r.WaitsFolded.MorePairs || f.Pairs != maxKeys-ListedWaits || listed+f.Waits != 80000 {
		t.Errorf("report: %d waits listed, folded %+v; want 80000 in all, %d pairs folded and more", listed, f, maxKeys-ListedWaits)
	}
	if d := roundTrip(t, a, opt); d.waitsBeyond != a.waitsBeyond {
		t.Errorf("decoded waits beyond the cap %+v, want %+v", d.waitsBeyond, a.waitsBeyond)
	}
}

// TestWaitsBeyondCapOnePass: one pass over more pairs than the model
// tells apart counts the waits of the rest together, with their
// findings, and encodes as the merge of two parts of its cases does.
func TestWaitsBeyondCapOnePass(t *testing.T) {
	const pairs = maxKeys + 3000
	opt := Options{}
	at := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	var evs []schema.Event
	for i := range pairs {
		c, act := fmt.Sprintf("c%06d", i), fmt.Sprintf("a%06d", i)
		evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Enqueue, Queue: "q", Activity: act, OccurredAt: at, Line: int64(len(evs))})
		if i%2 == 0 { // every other wait never started
			evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Start, Queue: "q", Activity: act, OccurredAt: at.Add(time.Minute), Line: int64(len(evs))})
		}
	}
	in := casePassInput(evs, opt)
	one := observeCases(opt, in)
	if b := one.waitsBeyond; b.waits != pairs-maxKeys || b.noStart != (pairs-maxKeys)/2 {
		t.Errorf("waits beyond the cap %+v, want %d, %d never started", b, pairs-maxKeys, (pairs-maxKeys)/2)
	}
	r := one.Report()
	if got := counted(r)[CodeWaitNoStart]; got != pairs/2 {
		t.Errorf("%s counts %d, want %d", CodeWaitNoStart, got, pairs/2)
	}
	// Two parts of the cases: the first 100, and the rest, more pairs
	// than the cap on its own.
	ob, _ := one.MarshalBinary()
	mergedLikeOnePass(t, opt, in, "c000100", ob)
}

// mergedLikeOnePass checks that the case-level states of in's cases
// before cut and from it on, merged, encode as one, one pass's state.
func mergedLikeOnePass(t *testing.T, opt Options, in []schema.Event, cut string, one []byte) {
	t.Helper()
	var lo, hi []schema.Event
	for _, e := range in { // in case order, as the case pass sees them
		if e.CaseID < cut {
			lo = append(lo, e)
		} else {
			hi = append(hi, e)
		}
	}
	m := observeCases(opt, lo)
	if err := m.Merge(roundTrip(t, observeCases(opt, hi), opt)); err != nil {
		t.Fatal(err)
	}
	if mb, _ := m.MarshalBinary(); !bytes.Equal(mb, one) {
		t.Errorf("one pass and the merge of its parts encode differently (%d and %d bytes)", len(one), len(mb))
	}
}

// TestReportFoldsWaits: a report lists the ListedWaits (queue, activity)
// pairs with the most waits and sums the rest, so its size stays bounded
// when a free-text column is mapped to activity; every wait is still
// counted once, and the wait findings count them all. Checked against a
// count kept here by pair.
func TestReportFoldsWaits(t *testing.T) {
	const pairs = ListedWaits + 1904
	opt := Options{}
	type tally struct{ waits, noStart int64 }
	want := map[[2]string]*tally{}
	var evs []schema.Event
	at := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	n := 0
	for i := range pairs {
		q, act := fmt.Sprintf("q%d", i%3), fmt.Sprintf("act-%05d", i)
		tl := &tally{}
		want[[2]string{q, act}] = tl
		for k := range 1 + i%5 { // 1 to 5 waits a pair
			c := fmt.Sprintf("c%d", n)
			n++
			evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Enqueue, Queue: q, Activity: act, OccurredAt: at, Line: int64(len(evs))})
			tl.waits++
			if k == 0 && i%7 == 0 { // never started: open at the end
				tl.noStart++
				continue
			}
			evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Start, Queue: q, Activity: act, OccurredAt: at.Add(time.Minute), Line: int64(len(evs))})
		}
		at = at.Add(time.Second)
	}
	r := observeCases(opt, casePassInput(evs, opt)).Report()

	// The listed pairs: most waits first, ties by queue then activity.
	keys := make([][2]string, 0, len(want))
	var allWaits, allNoStart int64
	for k, tl := range want {
		keys = append(keys, k)
		allWaits += tl.waits
		allNoStart += tl.noStart
	}
	slices.SortFunc(keys, func(x, y [2]string) int {
		if d := want[y].waits - want[x].waits; d != 0 {
			return int(d)
		}
		return strings.Compare(x[0]+"\x00"+x[1], y[0]+"\x00"+y[1])
	})
	listed := keys[:ListedWaits]
	slices.SortFunc(listed, func(x, y [2]string) int { return strings.Compare(x[0]+"\x00"+x[1], y[0]+"\x00"+y[1]) })
	if len(r.Raw.Waits) != ListedWaits || len(r.Waits) != ListedWaits {
		t.Fatalf("%d raw and %d report rows, want %d", len(r.Raw.Waits), len(r.Waits), ListedWaits)
	}
	var fw, fns int64
	for i, w := range r.Raw.Waits {
		k := listed[i]
		if w.Queue != k[0] || w.Activity != k[1] || w.Waits != want[k].waits || w.NoStart != want[k].noStart {
			t.Fatalf("row %d: %+v, want %v with %+v", i, w, k, *want[k])
		}
	}
	for _, k := range keys[ListedWaits:] {
		fw += want[k].waits
		fns += want[k].noStart
	}
	f := r.Raw.WaitsFolded
	if f == nil || f.Pairs != pairs-ListedWaits || f.Waits != fw || f.NoStart != fns || f.NoEnqueue != 0 {
		t.Fatalf("folded %+v, want %d pairs, %d waits, %d never started", f, pairs-ListedWaits, fw, fns)
	}
	if rf := r.WaitsFolded; rf == nil || rf.Waits != fw || rf.NoStart != fns || math.Abs(rf.Unobservable-float64(fns)/float64(fw)) > 1e-12 {
		t.Errorf("report's folded coverage %+v", rf)
	}
	if got := counted(r)[CodeWaitNoStart]; got != allNoStart {
		t.Errorf("%s counts %d, want %d of %d waits", CodeWaitNoStart, got, allNoStart, allWaits)
	}
	// The same through a merge with the report of no events.
	m, err := MergeReports(r, observeCases(opt, nil).Report())
	if err != nil {
		t.Fatal(err)
	}
	if mf := m.Raw.WaitsFolded; mf == nil || *mf != *f || len(m.Raw.Waits) != ListedWaits {
		t.Errorf("merged: %d rows, folded %+v; want %+v", len(m.Raw.Waits), mf, f)
	}
}

// stateV1Events are the events of testdata/quality-state-v1: waits of
// three pairs, one never started, one start with no enqueue.
func stateV1Events() []schema.Event {
	at := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	var evs []schema.Event
	for i := range 9 {
		c := fmt.Sprintf("c%d", i)
		q, act := fmt.Sprintf("q%d", i%2), fmt.Sprintf("a%d", i%3)
		t := at.Add(time.Duration(i) * time.Minute)
		evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Arrival, OccurredAt: t, Line: int64(len(evs) + 2)})
		if i != 4 {
			evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Enqueue, Queue: q, Activity: act, OccurredAt: t.Add(time.Minute), Line: int64(len(evs) + 2)})
		}
		if i != 7 {
			evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Start, Queue: q, Activity: act, OccurredAt: t.Add(3 * time.Minute), Line: int64(len(evs) + 2)})
			evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Complete, Queue: q, Activity: act, OccurredAt: t.Add(9 * time.Minute), Line: int64(len(evs) + 2)})
		}
		evs = append(evs, schema.Event{Site: "north", CaseID: c, Type: schema.Departure, OccurredAt: t.Add(10 * time.Minute), Line: int64(len(evs) + 2)})
	}
	return evs
}

// TestStateVersion1Read: a state of format 1, written by an earlier
// release (testdata/quality-state/README.md), reads as the state the same
// events give today, and encodes as today's.
func TestStateVersion1Read(t *testing.T) {
	v1, err := os.ReadFile("../testdata/quality-state/v1.bin")
	if err != nil {
		t.Fatal(err)
	}
	if v1[4] != 1 {
		t.Fatalf("testdata state is of format %d, want 1", v1[4])
	}
	opt := Options{}
	want := observeCases(opt, casePassInput(stateV1Events(), opt))
	got := NewAccumulator(opt)
	if err := got.UnmarshalBinary(v1); err != nil {
		t.Fatal(err)
	}
	wb, _ := want.MarshalBinary()
	gb, err := got.MarshalBinary()
	if err != nil || !bytes.Equal(gb, wb) || gb[4] != stateVersion {
		t.Errorf("re-encoded (%v):\n%x\nwant\n%x", err, gb, wb)
	}
	wr, _ := json.Marshal(want.Report())
	gr, _ := json.Marshal(got.Report())
	if !bytes.Equal(gr, wr) {
		t.Errorf("report of the read state:\n%s\nwant\n%s", gr, wr)
	}
}

// TestKeyBytesBound: names of long free text fill the model's tables by
// bytes before count: the pairs told apart hold at most maxKeyBytes of
// names, the waits of the rest are counted together, the state stays
// small, and one pass encodes as the merge of two parts of its cases.
func TestKeyBytesBound(t *testing.T) {
	const pairs = 6000
	pad := strings.Repeat("x", 1000)
	opt := Options{}
	at := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	var evs []schema.Event
	for i := range pairs {
		c, act := fmt.Sprintf("c%06d", i), fmt.Sprintf("%06d %s", i, pad)
		evs = append(evs,
			schema.Event{Site: "north", CaseID: c, Type: schema.Enqueue, Queue: "q", Activity: act, OccurredAt: at, Line: int64(len(evs))},
			schema.Event{Site: "north", CaseID: c, Type: schema.Start, Queue: "q", Activity: act, OccurredAt: at.Add(time.Minute), Line: int64(len(evs) + 1)},
			schema.Event{Site: "north", CaseID: c, Type: schema.Complete, Queue: "q", Activity: act, OccurredAt: at.Add(2 * time.Minute), Line: int64(len(evs) + 2)})
		at = at.Add(time.Second)
	}
	in := casePassInput(evs, opt)
	one := observeCases(opt, in)
	per := 1 + 7 + len(pad) // "q" and the activity
	told := maxKeyBytes / per
	if len(one.waits) != told || one.waitBytes > maxKeyBytes || one.waitsBeyond.waits != int64(pairs-told) {
		t.Errorf("%d pairs told apart (%d bytes), %d waits beyond; want %d, at most %d bytes, %d", len(one.waits), one.waitBytes, one.waitsBeyond.waits, told, maxKeyBytes, pairs-told)
	}
	var listed int64
	r := one.Report()
	for _, w := range r.Raw.Waits {
		listed += w.Waits
	}
	if f := r.Raw.WaitsFolded; f == nil || !f.MorePairs || listed+f.Waits != pairs {
		t.Errorf("report: %d waits listed, folded %+v; want %d in all", listed, f, pairs)
	}
	// The report lists ListedWaitBytes of names at most.
	if len(r.Raw.Waits) != ListedWaitBytes/per || len(r.Waits) != len(r.Raw.Waits) {
		t.Errorf("report lists %d pairs (%d raw), want %d: %d bytes of names", len(r.Waits), len(r.Raw.Waits), ListedWaitBytes/per, ListedWaitBytes)
	}
	b, err := one.MarshalBinary()
	if err != nil || len(b) > maxKeyBytes+1<<20 {
		t.Errorf("state of %d bytes (%v), want under %d", len(b), err, maxKeyBytes+1<<20)
	}
	mergedLikeOnePass(t, opt, in, "c001000", b)
	// The time pass's activity table: the same bound.
	tp := NewAccumulator(opt)
	for i := range evs {
		tp.Observe(&evs[i])
	}
	if tp.learnedBytes > maxKeyBytes || len(tp.learned) >= pairs {
		t.Errorf("time pass: %d activities of %d bytes, want at most %d bytes", len(tp.learned), tp.learnedBytes, maxKeyBytes)
	}
}
