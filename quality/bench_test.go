package quality

import (
	"errors"
	"io"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/synth"
)

// synthEvents reads the 1M-event benchmark stream through the schema
// reader, as the ingest does: fileOrder is the order of the rows, sorted
// the order after the ingest's stable sort by occurred_at.
var synthEvents = sync.OnceValues(func() (fileOrder, sorted []schema.Event) {
	const n = 1_000_000
	rd, err := schema.NewReader(synth.NewStream(1, n), schema.DefaultProfile(), schema.ReaderOptions{Name: "stream"})
	if err != nil {
		panic(err)
	}
	fileOrder = make([]schema.Event, 0, n)
	for {
		var e schema.Event
		rej, err := rd.Next(&e)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			panic(err)
		}
		if rej != nil {
			panic(rej.String())
		}
		fileOrder = append(fileOrder, e)
	}
	sorted = slices.Clone(fileOrder)
	slices.SortStableFunc(sorted, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	return fileOrder, sorted
})

// BenchmarkObserve runs the full model over the 1M-event synthetic stream
// per op, as the ingest does: ObserveFileOrder in file order, Observe in
// time order, then Report. It reports ns per event.
func BenchmarkObserve(b *testing.B) { benchObserve(b, false) }

// BenchmarkObserveCopiesDropped is BenchmarkObserve as an upload runs it,
// its copies dropped before quality (Options.CopiesDropped).
func BenchmarkObserveCopiesDropped(b *testing.B) { benchObserve(b, true) }

func benchObserve(b *testing.B, copiesDropped bool) {
	fileOrder, sorted := synthEvents()
	opt := Options{UploadedAt: sorted[len(sorted)-1].OccurredAt.Add(time.Hour), CopiesDropped: copiesDropped}
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		a := NewAccumulator(opt)
		for i := range fileOrder {
			a.ObserveFileOrder(&fileOrder[i])
		}
		a.ObserveSorted(sorted)
		_ = a.Report()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(sorted)), "ns/event")
}

// BenchmarkObserveFileOrder is the file-order pass alone.
func BenchmarkObserveFileOrder(b *testing.B) {
	fileOrder, _ := synthEvents()
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		a := NewAccumulator(Options{})
		for i := range fileOrder {
			a.ObserveFileOrder(&fileOrder[i])
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(fileOrder)), "ns/event")
}

// BenchmarkCasePass: the per-case pass alone (Event and Case), over
// 100,000 generated cases (about 700,000 events), as catalog runs it.
func BenchmarkCasePass(b *testing.B) {
	opt := Options{}
	in := casePassInput(genLog(11, 100_000), opt)
	b.ReportAllocs()
	n := 0
	for b.Loop() {
		observeCases(opt, in)
		n++
	}
	b.ReportMetric(float64(len(in)*n)/b.Elapsed().Seconds(), "events/s")
}
