package quality

import (
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// benchCases returns n pseudonym-like case ids.
func benchCases(n int) []string {
	ids := make([]string, n)
	for i := range ids {
		ids[i] = "k" + strconv.FormatUint(uint64(i+1)*0x9e3779b97f4a7c15, 36)
	}
	return ids
}

func benchEvent(id string, c int, t schema.EventType, at time.Time, line int) schema.Event {
	return schema.Event{
		Site: sites[c%2], CaseID: id, SubjectID: "s" + id, ResourceID: "r" + strconv.Itoa(c%40),
		Type: t, Activity: "triage", Queue: "q" + strconv.Itoa(c%5),
		Priority: "p2", Channel: "phone", Outcome: "served", EventID: strconv.Itoa(line),
		OccurredAt: at, Line: int64(line),
	}
}

// lifecycleStream is a realistic stream: 200k cases, one arriving every
// 1.5 s, each passing arrival, enqueue, start, complete and departure
// within about an hour, so some 2000 cases are active at a time while all
// 200k stay within the horizon. Times are whole seconds, so instants are
// shared now and then.
func lifecycleStream() []schema.Event {
	const cases = 200_000
	ids := benchCases(cases)
	rnd := rand.New(rand.NewPCG(1, 2))
	evs := make([]schema.Event, 0, 5*cases)
	sec := func(s int) time.Duration { return time.Duration(s) * time.Second }
	for c := range cases {
		at := t0.Add(sec(c * 3 / 2))
		enq := at.Add(sec(rnd.IntN(60)))
		start := enq.Add(sec(rnd.IntN(1800)))
		done := start.Add(sec(300 + rnd.IntN(900)))
		evs = append(evs,
			benchEvent(ids[c], c, schema.Arrival, at, 0), benchEvent(ids[c], c, schema.Enqueue, enq, 0),
			benchEvent(ids[c], c, schema.Start, start, 0), benchEvent(ids[c], c, schema.Complete, done, 0),
			benchEvent(ids[c], c, schema.Departure, done.Add(sec(60)), 0))
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	for i := range evs {
		evs[i].Line = int64(i + 2)
		evs[i].EventID = strconv.Itoa(i + 2)
	}
	return evs
}

// scatteredStream is the worst case for the per-case map: 200k cases
// visited round-robin, so every event touches a record not seen for 200k
// events and the whole map is the working set.
func scatteredStream() []schema.Event {
	const cases = 200_000
	ids := benchCases(cases)
	types := []schema.EventType{schema.Arrival, schema.Enqueue, schema.Start, schema.Complete, schema.Departure}
	evs := make([]schema.Event, 1_000_000)
	for i := range evs {
		c := i % cases
		evs[i] = benchEvent(ids[c], c, types[i/cases], t0.Add(time.Duration(i/3)*time.Second), i+2)
	}
	return evs
}

// benchObserve reports the steady-state cost of one event (ns/op and
// allocs/op are per event), cycling over the 1M-event stream with its
// times shifted each round so that it stays sorted.
func benchObserve(b *testing.B, evs []schema.Event) {
	span := evs[len(evs)-1].OccurredAt.Sub(evs[0].OccurredAt) + time.Second
	a := NewAccumulator(Options{UploadedAt: t0.Add(1000 * 24 * time.Hour), WindowFrom: t0})
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		e := &evs[i%len(evs)]
		if i >= len(evs) && i%len(evs) == 0 {
			for j := range evs {
				evs[j].OccurredAt = evs[j].OccurredAt.Add(span)
			}
		}
		a.Observe(e)
		i++
	}
}

func BenchmarkObserve(b *testing.B)          { benchObserve(b, lifecycleStream()) }
func BenchmarkObserveScattered(b *testing.B) { benchObserve(b, scatteredStream()) }

// BenchmarkObserve1M feeds a fresh accumulator the whole 1M-event
// lifecycle stream per op, map growth and the report included, and
// reports ns per event.
func BenchmarkObserve1M(b *testing.B) {
	evs := lifecycleStream()
	b.ReportAllocs()
	for b.Loop() {
		a := NewAccumulator(Options{UploadedAt: t0.Add(1000 * 24 * time.Hour), WindowFrom: t0})
		for i := range evs {
			a.Observe(&evs[i])
		}
		_ = a.Report()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(evs)), "ns/event")
}
