package quality

import (
	"fmt"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// The planted-defect fixture: each planter builds one small group of
// cases from a base instant and states exactly which finding counts the
// group adds (worked out by hand from the rules in SCORING.md). A stream
// holds n copies of each planter, one hour apart, so groups never share
// a case, a resource or (except where planted) an instant.
var (
	windowFrom = time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC)
	windowTo   = time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	uploadedAt = time.Date(2025, 1, 2, 0, 0, 0, 0, time.UTC)
	t0         = time.Date(2024, 3, 1, 8, 0, 0, 0, time.UTC)
)

func fixtureOptions() Options {
	// Little's law is tested on its own fixture; here it must not judge.
	return Options{UploadedAt: uploadedAt, WindowFrom: windowFrom, WindowTo: windowTo, LittleTolerance: 1e9}
}

type ev struct {
	typ  schema.EventType
	min  time.Duration // after the base, in minutes (may be fractional via time.Duration)
	site string
	res  string
	id   string // event_id; default derived
	out  string
}

type planter struct {
	name   string
	cases  [][]ev           // events per case
	expect map[string]int64 // finding counts one group adds
}

func m(n float64) time.Duration { return time.Duration(n * float64(time.Minute)) }

var planters = []planter{
	{name: "clean", cases: [][]ev{{{typ: "arrival"}, {typ: "enqueue", min: m(1)}, {typ: "start", min: m(5), res: "R"}, {typ: "complete", min: m(15), res: "R"}, {typ: "departure", min: m(16)}}}},
	{name: "exact duplicate", cases: [][]ev{{{typ: "arrival"}, {typ: "enqueue", min: m(1)}, {typ: "enqueue", min: m(1)}, {typ: "start", min: m(5), res: "R"}, {typ: "complete", min: m(15), res: "R"}, {typ: "departure", min: m(16)}}},
		expect: map[string]int64{CodeExactDuplicate: 1}},
	{name: "duplicate event id", cases: [][]ev{{{typ: "arrival"}, {typ: "enqueue", min: m(1)}, {typ: "start", min: m(5), res: "R", id: "same"}, {typ: "complete", min: m(15), res: "R", id: "same"}, {typ: "departure", min: m(16)}}},
		expect: map[string]int64{CodeDuplicateEventID: 1}},
	{name: "same case type time", cases: [][]ev{{{typ: "arrival"}, {typ: "enqueue", min: m(1)}, {typ: "start", min: m(5), res: "R"}, {typ: "complete", min: m(15), res: "R"}, {typ: "complete", min: m(15), res: "R", id: "other", out: "other"}, {typ: "departure", min: m(16)}}},
		expect: map[string]int64{CodeDuplicateCaseTypeTime: 1, CodeSameInstant: 1}},
	{name: "start before arrival", cases: [][]ev{{{typ: "start", res: "R"}, {typ: "arrival", min: m(2)}, {typ: "complete", min: m(10), res: "R"}}},
		expect: map[string]int64{CodeStartBeforeArrival: 1, CodeWaitNoEnqueue: 1}},
	{name: "complete before start", cases: [][]ev{{{typ: "arrival"}, {typ: "complete", min: m(3)}, {typ: "start", min: m(4), res: "R"}}},
		expect: map[string]int64{CodeCompleteBeforeStart: 1}},
	{name: "departure before arrival", cases: [][]ev{{{typ: "departure"}, {typ: "arrival", min: m(5)}}},
		expect: map[string]int64{CodeDepartureBeforeArrival: 1}},
	{name: "activity after departure", cases: [][]ev{{{typ: "arrival"}, {typ: "departure", min: m(1)}, {typ: "start", min: m(3), res: "R"}}},
		expect: map[string]int64{CodeActivityAfterDeparture: 1}},
	{name: "case too long", cases: [][]ev{{{typ: "arrival"}, {typ: "start", min: m(20 * 24 * 60), res: "R"}, {typ: "complete", min: m(20*24*60 + 10), res: "R"}, {typ: "departure", min: m(31 * 24 * 60)}}},
		expect: map[string]int64{CodeCaseTooLong: 1}},
	{name: "service too long", cases: [][]ev{{{typ: "arrival"}, {typ: "start", min: m(1), res: "R"}, {typ: "complete", min: m(25 * 60), res: "R"}, {typ: "departure", min: m(26 * 60)}}},
		expect: map[string]int64{CodeServiceTooLong: 1}},
	{name: "same instant order", cases: [][]ev{{{typ: "arrival"}, {typ: "start", min: m(1), res: "R"}, {typ: "complete", min: m(1), res: "R"}, {typ: "departure", min: m(2)}}},
		expect: map[string]int64{CodeSameInstant: 1, CodeSameInstantOrder: 1}},
	{name: "resource overlap", cases: [][]ev{
		{{typ: "arrival"}, {typ: "start", min: m(1), res: "S"}, {typ: "complete", min: m(10), res: "S"}, {typ: "departure", min: m(11)}},
		{{typ: "arrival"}, {typ: "start", min: m(2), res: "S"}, {typ: "complete", min: m(12), res: "S"}, {typ: "departure", min: m(13)}}},
		expect: map[string]int64{CodeResourceOverlap: 1}},
	{name: "site change", cases: [][]ev{{{typ: "arrival"}, {typ: "start", min: m(1), site: "south", res: "R"}, {typ: "complete", min: m(5), site: "south", res: "R"}, {typ: "departure", min: m(6), site: "south"}}},
		expect: map[string]int64{CodeSiteChangeWithoutTransfer: 1}},
	{name: "transfer (clean)", cases: [][]ev{{{typ: "arrival"}, {typ: "transfer", min: m(1)}, {typ: "start", min: m(2), site: "south", res: "R"}, {typ: "complete", min: m(5), site: "south", res: "R"}, {typ: "departure", min: m(6), site: "south"}}}},
	{name: "census negative", cases: [][]ev{{{typ: "arrival", site: "east"}, {typ: "departure", min: m(1), site: "east"}, {typ: "departure", min: m(2), site: "east"}}},
		expect: map[string]int64{CodeCensusNegative: 1}},
	{name: "wait without start", cases: [][]ev{{{typ: "arrival"}, {typ: "enqueue", min: m(1)}, {typ: "departure", min: m(3)}}},
		expect: map[string]int64{CodeWaitNoStart: 1}},
	{name: "abandon (clean)", cases: [][]ev{{{typ: "arrival"}, {typ: "enqueue", min: m(1)}, {typ: "abandon", min: m(4)}, {typ: "departure", min: m(5)}}}},
}

// stream builds n groups of every planter (the census group only once:
// a second one would find the census at -1 already), plus future and
// early single arrivals, sorted by time (stably), lines from 2.
func stream(n, future, early int) []schema.Event {
	var evs []schema.Event
	slot := 0
	for _, p := range planters {
		reps := n
		if p.name == "census negative" {
			reps = 1
		}
		for r := range reps {
			base := t0.Add(time.Duration(slot) * time.Hour)
			slot++
			for ci, c := range p.cases {
				id := fmt.Sprintf("%s/%d/%d", p.name, r, ci)
				for k, x := range c {
					evs = append(evs, x.event(id, base, k, r))
				}
			}
		}
	}
	for i := range future {
		evs = append(evs, ev{typ: "arrival"}.event(fmt.Sprintf("future/%d", i), uploadedAt.Add(time.Duration(i+1)*time.Hour), 0, i))
	}
	for i := range early {
		evs = append(evs, ev{typ: "arrival"}.event(fmt.Sprintf("early/%d", i), windowFrom.Add(-time.Duration(i+1)*time.Hour), 0, i))
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	for i := range evs {
		evs[i].Line = int64(i + 2)
	}
	return evs
}

// event builds one event. Field rules the completeness test relies on:
// subject always, queue on enqueue/start/abandon, activity always,
// priority on arrivals, channel never, outcome on completes.
func (x ev) event(caseID string, base time.Time, k, rep int) schema.Event {
	site := x.site
	if site == "" {
		site = "north"
	}
	e := schema.Event{Site: site, CaseID: caseID, SubjectID: "subj-" + caseID, Type: x.typ, Activity: "triage",
		OccurredAt: base.Add(x.min)}
	if x.res != "" {
		e.ResourceID = fmt.Sprintf("%s-%s", x.res, caseID)
		if x.res == "S" { // shared by the cases of one group
			e.ResourceID = fmt.Sprintf("shared-%d-%s", rep, base.Format("0102150405"))
		}
	}
	switch x.typ {
	case schema.Enqueue, schema.Start, schema.Abandon:
		e.Queue = "q1"
	case schema.Arrival:
		e.Priority = "p2"
	case schema.Complete:
		e.Outcome = "served"
		if x.out != "" {
			e.Outcome = x.out
		}
	}
	e.EventID = fmt.Sprintf("%s#%d", caseID, k)
	if x.id != "" {
		e.EventID = caseID + "#" + x.id
	}
	if x.typ == schema.Enqueue && k == 2 && caseID[:5] == "exact" {
		e.EventID = fmt.Sprintf("%s#%d", caseID, 1) // an exact copy of the first enqueue
	}
	return e
}

// expected sums the planters' stated counts for a stream of n groups.
func expected(n, future, early int) map[string]int64 {
	want := map[string]int64{}
	for _, p := range planters {
		reps := int64(n)
		if p.name == "census negative" {
			reps = 1
		}
		for code, c := range p.expect {
			want[code] += c * reps
		}
	}
	want[CodeLaterThanUpload] += int64(future)
	want[CodeOutsideWindow] += int64(future + early)
	return want
}
