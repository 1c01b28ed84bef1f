package quality

import (
	"cmp"
	"fmt"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestCapacityByQueueAndResource: two chat agents may hold three chats at
// once (capacity by queue), phone agents one call, one phone agent two
// (capacity by resource). The resource overlaps and the most services
// held at once under each declared capacity equal an independent sweep
// over the same events (completes before starts at one instant); with
// no capacity declared, every agent holds one and the overlaps are those
// of the sweep with capacity 1.
func TestCapacityByQueueAndResource(t *testing.T) {
	r := rand.New(rand.NewPCG(4, 4))
	base := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	const r4 = "rrrrrrrrrrrrrrrrrrrrrrrrr4" // a pseudonym-shaped resource id
	pools := map[string][]string{"chat": {"chat-a", "chat-b"}, "phone": {"phone-a", r4}}
	var evs []schema.Event
	at := base
	for i := range 600 {
		at = at.Add(time.Duration(30+r.IntN(120)) * time.Second)
		q := "chat"
		if r.IntN(2) == 0 {
			q = "phone"
		}
		res := pools[q][r.IntN(2)]
		d := time.Duration(300+r.IntN(600)) * time.Second
		c := fmt.Sprintf("c%d", i)
		evs = append(evs,
			schema.Event{Site: "s", CaseID: c, Type: schema.Start, Activity: "serve", Queue: q, ResourceID: res, OccurredAt: at, Line: int64(2*i + 2)},
			schema.Event{Site: "s", CaseID: c, Type: schema.Complete, Activity: "serve", Queue: q, ResourceID: res, OccurredAt: at.Add(d), Line: int64(2*i + 3)})
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int {
		closing := func(e schema.Event) int {
			if e.Type == schema.Complete {
				return 0
			}
			return 1
		}
		return cmp.Or(a.OccurredAt.Compare(b.OccurredAt), closing(a)-closing(b))
	})
	capacity := &schema.Capacity{Queues: map[string]int{"chat": 3}, Resources: map[string]int{r4: 2}}

	// Independent sweep.
	sweep := func(capOf func(res, q string) int) (over int64, peaks map[string]int) {
		open := map[string]int{}
		peaks = map[string]int{}
		for _, e := range evs {
			if e.Type == schema.Complete {
				open[e.ResourceID]--
				continue
			}
			if open[e.ResourceID] >= capOf(e.ResourceID, e.Queue) {
				over++
			}
			open[e.ResourceID]++
			key := "queue " + e.Queue
			if e.ResourceID == r4 {
				key = "resource " + r4
			}
			peaks[key] = max(peaks[key], open[e.ResourceID])
		}
		return over, peaks
	}
	wantOver, wantPeaks := sweep(func(res, q string) int {
		switch {
		case res == r4:
			return 2
		case q == "chat":
			return 3
		}
		return 1
	})
	wantOver1, _ := sweep(func(string, string) int { return 1 })
	delete(wantPeaks, "queue phone") // no capacity declared for it

	rep := run(Options{Capacity: capacity}, evs, nil, nil)
	if got := rep.Count(CodeResourceOverlap); got != wantOver {
		t.Errorf("resource_overlap %d with capacities, independent sweep %d", got, wantOver)
	}
	gotPeaks := map[string]int{}
	for _, p := range rep.Raw.CapacityPeaks {
		key := "queue " + p.Queue
		if p.Resource != "" {
			key = "resource " + p.Resource
		}
		gotPeaks[key] = p.Peak
		if want := capacity.Of(p.Resource, p.Queue, 1); p.Capacity != want {
			t.Errorf("%s: capacity %d, declared %d", key, p.Capacity, want)
		}
	}
	if fmt.Sprint(gotPeaks) != fmt.Sprint(wantPeaks) {
		t.Errorf("capacity peaks %v, independent sweep %v", gotPeaks, wantPeaks)
	}
	if rep.Raw.Settings.Capacity == nil || rep.Raw.Settings.Capacity.Queues["chat"] != 3 {
		t.Errorf("settings capacity %+v", rep.Raw.Settings.Capacity)
	}
	one := run(Options{}, evs, nil, nil)
	if got := one.Count(CodeResourceOverlap); got != wantOver1 || wantOver1 <= wantOver || len(one.Raw.CapacityPeaks) != 0 {
		t.Errorf("resource_overlap %d without capacities, independent sweep %d (with capacities %d); peaks %v", got, wantOver1, wantOver, one.Raw.CapacityPeaks)
	}
	// Merged reports keep the larger peak of each capacity.
	m, err := MergeReports(rep, run(Options{Capacity: capacity}, evs[:40], nil, nil))
	if err != nil {
		t.Fatal(err)
	}
	if fmt.Sprint(m.Raw.CapacityPeaks) != fmt.Sprint(rep.Raw.CapacityPeaks) {
		t.Errorf("merged peaks %v, want %v", m.Raw.CapacityPeaks, rep.Raw.CapacityPeaks)
	}
	t.Logf("overlaps %d with capacities, %d with 1; peaks %v", wantOver, wantOver1, wantPeaks)
}
