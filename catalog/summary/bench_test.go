package summary

import (
	"io"
	"slices"
	"testing"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/synth"
)

// streamEvents parses synth.NewStream(seed, n) and sorts it by time, as
// catalog hands events to Observe.
func streamEvents(b *testing.B, seed uint64, n int64) []schema.Event {
	b.Helper()
	rd, err := schema.NewReader(synth.NewStream(seed, n), nil, schema.ReaderOptions{})
	if err != nil {
		b.Fatal(err)
	}
	evs := make([]schema.Event, 0, n)
	for {
		var e schema.Event
		rej, err := rd.Next(&e)
		if err == io.EOF {
			break
		}
		if err != nil || rej != nil {
			b.Fatal(err, rej)
		}
		evs = append(evs, e)
	}
	slices.SortStableFunc(evs, func(x, y schema.Event) int { return x.OccurredAt.Compare(y.OccurredAt) })
	return evs
}

func BenchmarkObserve(b *testing.B) {
	evs := streamEvents(b, 1, 300_000)
	b.ResetTimer()
	for b.Loop() {
		a := New(Options{})
		a.ObserveAll(evs)
		a.finish()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(len(evs)), "ns/event")
}

// mergedState is the state of 7 nightly files of the stream, merged.
func mergedState(b *testing.B) *Accumulator {
	m := New(Options{})
	for d := range 7 {
		a := New(Options{})
		evs := streamEvents(b, uint64(d+1), 50_000)
		a.ObserveAll(evs)
		if err := m.Merge(a); err != nil {
			b.Fatal(err)
		}
	}
	return m
}

func BenchmarkSummary(b *testing.B) {
	m := mergedState(b)
	b.ResetTimer()
	for b.Loop() {
		_ = m.Summary()
	}
}

func BenchmarkUnmarshal(b *testing.B) {
	data, err := mergedState(b).MarshalBinary()
	if err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for b.Loop() {
		if err := New(Options{}).UnmarshalBinary(data); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(data)), "state-bytes")
}
