package quality

import (
	"fmt"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestEventIDBound: with the event_id check's table bounded below what a
// dense window needs (Options.MaxEventIDSlots), the report says from when
// and how far the check still looked back (Settings.EventIDBound), and
// duplicate_event_id counts at least every repeat closer than that
// look-back and at most every repeat within the window, both counted here
// with a map; unbounded, it counts exactly the repeats within the window.
// Merged reports keep the earliest start and the shortest look-back.
func TestEventIDBound(t *testing.T) {
	base := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	rnd := rand.New(rand.NewPCG(3, 4))
	var evs []schema.Event
	var ids []string
	for i := range 60_000 {
		id := fmt.Sprintf("e%d", i)
		if len(ids) > 0 && rnd.IntN(5) == 0 {
			back := rnd.IntN(min(len(ids), 50)) // mostly a recent id
			if rnd.IntN(3) == 0 {
				back = rnd.IntN(len(ids)) // sometimes one hours old
			}
			id = ids[len(ids)-1-back]
		} else {
			ids = append(ids, id)
		}
		evs = append(evs, schema.Event{Line: int64(i + 2), Site: "north", CaseID: fmt.Sprintf("c%d", i), Type: schema.Arrival,
			EventID: id, OccurredAt: base.Add(time.Duration(i) * time.Second)})
	}
	// Repeats by their distance from the id's previous sighting.
	last := map[string]time.Time{}
	var gaps []time.Duration
	for _, e := range evs {
		if p, ok := last[e.EventID]; ok {
			gaps = append(gaps, e.OccurredAt.Sub(p))
		}
		last[e.EventID] = e.OccurredAt
	}
	within := func(d time.Duration) (n int64) {
		for _, g := range gaps {
			if g < d {
				n++
			}
		}
		return n
	}
	report := func(slots int) *Report {
		a := NewAccumulator(Options{MaxEventIDSlots: slots})
		for i := range evs {
			a.Observe(&evs[i])
		}
		return a.Report()
	}

	free := report(0)
	if b := free.Raw.Settings.EventIDBound; b != nil {
		t.Fatalf("default bound reached on %d events: %+v", len(evs), b)
	}
	if got, want := free.Count(CodeDuplicateEventID), within(DefaultEventIDWindow+time.Nanosecond); got != want {
		t.Errorf("unbounded: duplicate_event_id %d, want %d", got, want)
	}

	r := report(4096)
	b := r.Raw.Settings.EventIDBound
	if b == nil || b.Slots != 4096 || b.Dropped == 0 || b.From.Before(base) {
		t.Fatalf("bound of 4,096 slots: %+v", b)
	}
	lookback := time.Duration(b.LookbackSeconds * float64(time.Second))
	got, lo, hi := r.Count(CodeDuplicateEventID), within(lookback), within(DefaultEventIDWindow+time.Nanosecond)
	if got < lo || got > hi || lo == hi {
		t.Errorf("bounded: duplicate_event_id %d, want between %d (repeats closer than the look-back %v) and %d", got, lo, lookback, hi)
	}
	t.Logf("bound %+v: %d duplicates found, %d closer than the look-back, %d in the window", *b, got, lo, hi)
	var text strings.Builder
	if err := r.Text(&text, false); err != nil {
		t.Fatal(err)
	}
	want := fmt.Sprintf("event_id check: its memory bound (event_id_bound, 4096 slots) forgot %d ids still in the window; from %s it looked back at least %s, not 24h0m0s",
		b.Dropped, b.From.Format(time.RFC3339), lookback)
	if !strings.Contains(text.String(), want) {
		t.Errorf("text report lacks %q:\n%s", want, text.String())
	}
	text.Reset()
	free.Text(&text, false)
	if strings.Contains(text.String(), "event_id_bound") {
		t.Errorf("text report of an unbounded check names the bound")
	}

	m, err := MergeReports(free, r)
	if err != nil {
		t.Fatal(err)
	}
	if mb := m.Raw.Settings.EventIDBound; mb == nil || *mb != *b {
		t.Errorf("merged bound %+v, want %+v", mb, b)
	}
}
