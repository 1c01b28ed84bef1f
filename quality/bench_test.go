package quality

import (
	"strconv"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// benchStream is a generated stream shape: 1M events over 200k cases with
// pseudonym-like ids, a few events per instant and all fields filled.
func benchStream(n int) []schema.Event {
	types := []schema.EventType{schema.Arrival, schema.Enqueue, schema.Start, schema.Complete, schema.Departure}
	const cases = 200_000
	ids := make([]string, cases)
	for i := range ids {
		ids[i] = "k" + strconv.FormatUint(uint64(i)*0x9e3779b97f4a7c15, 36)
	}
	evs := make([]schema.Event, n)
	for i := range evs {
		c := i % cases
		evs[i] = schema.Event{
			Site: sites[c%2], CaseID: ids[c], SubjectID: ids[(c*7)%cases], ResourceID: "r" + strconv.Itoa(c%40),
			Type: types[(i/cases)%len(types)], Activity: "triage", Queue: "q" + strconv.Itoa(c%5),
			Priority: "p2", Channel: "phone", Outcome: "served", EventID: strconv.Itoa(i),
			Line: int64(i + 2),
		}
	}
	return evs
}

// BenchmarkObserve reports the steady-state cost of one event (ns/op and
// allocs/op are per event): the stream's times advance every third event.
func BenchmarkObserve(b *testing.B) {
	evs := benchStream(1_000_000)
	a := NewAccumulator(Options{UploadedAt: t0.Add(1000 * time.Hour), WindowFrom: t0})
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		e := &evs[i%len(evs)]
		e.OccurredAt = t0.Add(time.Duration(i/3) * time.Second)
		a.Observe(e)
		i++
	}
}

// BenchmarkObserve1M feeds a fresh accumulator a whole 1M-event stream per
// op, map growth included, and reports ns per event.
func BenchmarkObserve1M(b *testing.B) {
	evs := benchStream(1_000_000)
	for i := range evs {
		evs[i].OccurredAt = t0.Add(time.Duration(i/3) * time.Second)
	}
	b.ReportAllocs()
	for b.Loop() {
		a := NewAccumulator(Options{UploadedAt: t0.Add(1000 * time.Hour), WindowFrom: t0})
		for i := range evs {
			a.Observe(&evs[i])
		}
		_ = a.Report()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(evs)), "ns/event")
}
