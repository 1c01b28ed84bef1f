package quality

import (
	"fmt"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// The planted-defect fixture: a calendar and a generator of a time-sorted
// stream with known numbers of each defect.
var (
	windowFrom = time.Date(2024, 3, 1, 0, 0, 0, 0, time.UTC)
	windowTo   = time.Date(2024, 4, 1, 0, 0, 0, 0, time.UTC)
	uploadedAt = time.Date(2024, 4, 1, 2, 0, 0, 0, time.UTC)
	t0         = time.Date(2024, 3, 1, 8, 0, 0, 0, time.UTC)
)

func fixtureOptions() Options {
	return Options{UploadedAt: uploadedAt, WindowFrom: windowFrom, WindowTo: windowTo}
}

// plant says how many of each defect the generator plants.
type plant struct {
	normal              int // clean cases: arrival, enqueue, start, complete, departure
	dups                int // exact copies of the enqueue of the first normal cases
	startBeforeArrival  int // cases: start, arrival 2 min later, complete
	completeBeforeStart int // cases: arrival, complete, start 1 min after the complete
	future              int // single arrivals after the upload (also outside the window)
	early               int // single arrivals before the window
	rejections          map[schema.Reason]int
}

// Besides the planted defects every stream holds two clean traps: a case
// whose start and arrival share an instant (start first in the stream),
// and a case enqueued again after a transfer.
const trapEvents = 3 + 8

var sites = [2]string{"north", "south"}

func event(c string, site int, typ schema.EventType, at time.Time) schema.Event {
	e := schema.Event{
		Site: sites[site%2], CaseID: c, SubjectID: "s" + c, Type: typ,
		Activity: "triage", Queue: "q1", OccurredAt: at,
		EventID: c + "/" + string(typ) + "/" + at.Format("150405"),
	}
	// Field presence rules the expected completeness is computed from:
	// resource on start and complete, queue on all but departure,
	// priority on arrivals, outcome on completes, channel never.
	switch typ {
	case schema.Start, schema.Complete:
		e.ResourceID = "r1"
	}
	switch typ {
	case schema.Departure:
		e.Queue = ""
	case schema.Arrival:
		e.Priority = "p2"
	case schema.Complete:
		e.Outcome = "served"
	}
	return e
}

// events returns the stream, sorted by time, with lines numbered from 2.
func (p plant) events() []schema.Event {
	var evs []schema.Event
	slot := 0
	next := func() time.Time { slot++; return t0.Add(time.Duration(slot-1) * 10 * time.Minute) }
	min := func(t time.Time, m int) time.Time { return t.Add(time.Duration(m) * time.Minute) }
	for i := range p.normal {
		c, b := fmt.Sprintf("n%03d", i), next()
		evs = append(evs, event(c, i, schema.Arrival, b), event(c, i, schema.Enqueue, min(b, 1)))
		if i < p.dups {
			evs = append(evs, event(c, i, schema.Enqueue, min(b, 1)))
		}
		evs = append(evs, event(c, i, schema.Start, min(b, 5)), event(c, i, schema.Complete, min(b, 15)),
			event(c, i, schema.Departure, min(b, 16)))
	}
	for i := range p.startBeforeArrival {
		c, b := fmt.Sprintf("m%03d", i), next()
		evs = append(evs, event(c, i, schema.Start, b), event(c, i, schema.Arrival, min(b, 2)),
			event(c, i, schema.Complete, min(b, 10)))
	}
	for i := range p.completeBeforeStart {
		c, b := fmt.Sprintf("j%03d", i), next()
		evs = append(evs, event(c, i, schema.Arrival, b), event(c, i, schema.Complete, min(b, 3)),
			event(c, i, schema.Start, min(b, 4)))
	}
	b := next()
	evs = append(evs, event("eq", 0, schema.Start, b), event("eq", 0, schema.Arrival, b),
		event("eq", 0, schema.Complete, min(b, 5)))
	b = next()
	for _, s := range []struct {
		t schema.EventType
		m int
	}{{schema.Arrival, 0}, {schema.Enqueue, 1}, {schema.Start, 2}, {schema.Complete, 5},
		{schema.Transfer, 6}, {schema.Enqueue, 7}, {schema.Start, 9}, {schema.Complete, 12}} {
		evs = append(evs, event("re", 1, s.t, min(b, s.m)))
	}
	for i := range p.early {
		evs = append(evs, event(fmt.Sprintf("e%03d", i), i, schema.Arrival, windowFrom.Add(-time.Duration(i+1)*time.Hour)))
	}
	for i := range p.future {
		evs = append(evs, event(fmt.Sprintf("f%03d", i), i, schema.Arrival, uploadedAt.Add(time.Duration(i+1)*time.Hour)))
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	for i := range evs {
		evs[i].Line = int64(i + 2)
	}
	return evs
}

// rejected returns the planted rejections, in reason order, on lines
// after the events.
func (p plant) rejected() []schema.Rejection {
	var rs []schema.Rejection
	line := int64(5000)
	reasons := mapKeys(p.rejections)
	slices.Sort(reasons)
	for _, reason := range reasons {
		for range p.rejections[reason] {
			line++
			rs = append(rs, schema.Rejection{Line: line, Column: "when", Field: schema.FieldOccurredAt, Reason: reason, Message: "x"})
		}
	}
	return rs
}

func mapKeys[K comparable, V any](m map[K]V) []K {
	var ks []K
	for k := range m {
		ks = append(ks, k)
	}
	return ks
}

// run feeds the whole fixture to one accumulator.
func (p plant) run(opt Options) *Accumulator {
	a := NewAccumulator(opt)
	for _, e := range p.events() {
		a.Observe(&e)
	}
	for _, r := range p.rejected() {
		a.Reject(r)
	}
	return a
}

// The planted set whose expected numbers are worked out by hand in
// TestPlantedDefects.
var handPlant = plant{
	normal: 20, dups: 3, startBeforeArrival: 4, completeBeforeStart: 2, future: 2, early: 3,
	rejections: map[schema.Reason]int{
		schema.ReasonBadTimestamp: 3, schema.ReasonNonexistentLocal: 1, schema.ReasonAmbiguousLocal: 2,
		schema.ReasonMissingRequired: 7, schema.ReasonFieldCount: 2,
	},
}
