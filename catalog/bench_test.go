package catalog

import (
	"context"
	"io"
	"log/slog"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"runtime/metrics"
	"strconv"
	"sync"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/synth"
)

// benchEvents is the stream length: FLOWCAT_BENCH_EVENTS, default 1M.
func benchEvents(b *testing.B) int64 {
	n := int64(1_000_000)
	if s := os.Getenv("FLOWCAT_BENCH_EVENTS"); s != "" {
		v, err := strconv.ParseInt(s, 10, 64)
		if err != nil || v <= 0 {
			b.Fatalf("FLOWCAT_BENCH_EVENTS=%q", s)
		}
		n = v
	}
	return n
}

// heapPeak samples the bytes of live and unswept heap objects every 10 ms
// until stop is called, and returns the largest sample.
func heapPeak() (stop func() uint64) {
	sample := []metrics.Sample{{Name: "/memory/classes/heap/objects:bytes"}}
	read := func() uint64 {
		metrics.Read(sample)
		return sample[0].Value.Uint64()
	}
	var peak uint64
	done := make(chan struct{})
	var wg sync.WaitGroup
	wg.Go(func() {
		t := time.NewTicker(10 * time.Millisecond)
		defer t.Stop()
		for {
			peak = max(peak, read())
			select {
			case <-done:
				return
			case <-t.C:
			}
		}
	})
	return func() uint64 {
		close(done)
		wg.Wait()
		return max(peak, read())
	}
}

// BenchmarkIngest ingests synth.NewStream(seed, n) into a fresh store per
// iteration and reports events/s, the peak heap and the snapshot's bytes
// per event.
func BenchmarkIngest(b *testing.B) {
	n := benchEvents(b)
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	var elapsed time.Duration
	var peak, size uint64
	iters := 0
	for b.Loop() {
		b.StopTimer()
		dir := b.TempDir()
		tmp := filepath.Join(dir, "tmp")
		os.Mkdir(tmp, 0o700)
		bs, err := localfs.New(filepath.Join(dir, "blobs"))
		if err != nil {
			b.Fatal(err)
		}
		s, err := Open(filepath.Join(dir, "catalog.db"), bs, Options{Master: mk, TempDir: tmp,
			Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
		if err != nil {
			b.Fatal(err)
		}
		if _, err := s.CreateProject(ctx, "bench", "", "bench"); err != nil {
			b.Fatal(err)
		}
		if _, err := s.CreateDataset(ctx, DatasetSpec{Project: "bench", Name: "stream"}, "bench"); err != nil {
			b.Fatal(err)
		}
		runtime.GC()
		stop := heapPeak()
		b.StartTimer()

		t0 := time.Now()
		res, err := s.Ingest(ctx, "bench", "stream", synth.NewStream(uint64(iters+1), n), IngestOptions{Filename: "stream.csv"})
		if err != nil {
			b.Fatal(err)
		}
		elapsed += time.Since(t0)

		b.StopTimer()
		peak = max(peak, stop())
		if res.Version.Manifest.Rows != n {
			b.Fatalf("%d rows stored of %d", res.Version.Manifest.Rows, n)
		}
		size = uint64(res.Version.Manifest.Files[0].Bytes)
		s.Close()
		os.RemoveAll(dir)
		iters++
		b.StartTimer()
	}
	b.ReportMetric(float64(n)*float64(iters)/elapsed.Seconds(), "events/s")
	b.ReportMetric(float64(peak)/(1<<20), "peak-heap-MB")
	b.ReportMetric(float64(size)/float64(n), "parquet-B/event")
}

// benchEvent fills e as the ingest would see it after pseudonymization:
// 26-character identifiers, a few distinct codes, times in near order.
func benchEvent(e *schema.Event, r *rand.Rand, i int, ids []string) {
	*e = schema.Event{
		Site: "qb-walkin", CaseID: ids[r.IntN(len(ids))], SubjectID: ids[r.IntN(len(ids))], ResourceID: ids[i%40],
		Type: schema.Start, Activity: "triage", Queue: "walkin",
		OccurredAt: genBase.Add(time.Duration(i)*2*time.Second - time.Duration(r.IntN(60))*time.Second),
		Priority:   "3", Channel: "phone", EventID: ids[i%len(ids)], Line: int64(i + 2),
	}
}

func benchIDs() []string {
	ids := make([]string, 4096)
	p, _ := benchPseudonymizer()
	for i := range ids {
		ids[i] = p.Pseudonym(schema.FieldCaseID, strconv.Itoa(i))
	}
	return ids
}

// BenchmarkSort measures the external sort alone (buffer, spill, merge)
// per event, at the default run size.
func BenchmarkSort(b *testing.B) {
	n := int(benchEvents(b))
	ids := benchIDs()
	dir := b.TempDir()
	var e schema.Event
	var elapsed time.Duration
	for b.Loop() {
		r := rand.New(rand.NewPCG(1, 2))
		t0 := time.Now()
		s := newSorter(dir, 1<<16)
		for i := range n {
			benchEvent(&e, r, i, ids)
			if err := s.Add(&e); err != nil {
				b.Fatal(err)
			}
		}
		if err := s.Finish(func(*schema.Event) error { return nil }); err != nil {
			b.Fatal(err)
		}
		s.Close()
		elapsed += time.Since(t0)
	}
	b.ReportMetric(float64(n)*float64(b.N)/elapsed.Seconds(), "events/s")
}

// BenchmarkStages times the ingest's stages separately over the synth
// stream, in events/s: parse (schema.Reader), +pseudonymize, quality
// (Observe), and the Parquet writer.
func BenchmarkStages(b *testing.B) {
	n := benchEvents(b)
	report := func(b *testing.B, d time.Duration) {
		b.ReportMetric(float64(n)*float64(b.N)/d.Seconds(), "events/s")
	}
	b.Run("parse", func(b *testing.B) {
		var d time.Duration
		for b.Loop() {
			t0 := time.Now()
			rd, err := schema.NewReader(synth.NewStream(1, n), nil, schema.ReaderOptions{})
			if err != nil {
				b.Fatal(err)
			}
			var e schema.Event
			for {
				if _, err := rd.Next(&e); err == io.EOF {
					break
				} else if err != nil {
					b.Fatal(err)
				}
			}
			d += time.Since(t0)
		}
		report(b, d)
	})
	b.Run("generate", func(b *testing.B) {
		var d time.Duration
		for b.Loop() {
			t0 := time.Now()
			if _, err := io.Copy(io.Discard, synth.NewStream(1, n)); err != nil {
				b.Fatal(err)
			}
			d += time.Since(t0)
		}
		report(b, d)
	})
	b.Run("pseudonymize", func(b *testing.B) {
		p, _ := benchPseudonymizer()
		ids := benchIDs()
		var e schema.Event
		r := rand.New(rand.NewPCG(1, 2))
		var d time.Duration
		for b.Loop() {
			t0 := time.Now()
			for i := range int(n) {
				benchEvent(&e, r, i, ids)
				p.Apply(&e)
			}
			d += time.Since(t0)
		}
		report(b, d)
	})
	b.Run("quality", func(b *testing.B) {
		ids := benchIDs()
		var e schema.Event
		var d time.Duration
		for b.Loop() {
			r := rand.New(rand.NewPCG(1, 2))
			a := quality.NewAccumulator(quality.Options{UploadedAt: testNow})
			t0 := time.Now()
			for i := range int(n) {
				benchEvent(&e, r, i, ids)
				e.OccurredAt = genBase.Add(time.Duration(i) * 2 * time.Second)
				a.Observe(&e)
			}
			a.Report()
			d += time.Since(t0)
		}
		report(b, d)
	})
	b.Run("parquet", func(b *testing.B) {
		ids := benchIDs()
		dir := b.TempDir()
		var e schema.Event
		var d time.Duration
		for b.Loop() {
			r := rand.New(rand.NewPCG(1, 2))
			t0 := time.Now()
			sw, err := newSnapshotWriter(dir, 1<<16, "k")
			if err != nil {
				b.Fatal(err)
			}
			for i := range int(n) {
				benchEvent(&e, r, i, ids)
				e.OccurredAt = genBase.Add(time.Duration(i) * 2 * time.Second)
				if err := sw.Write(&e); err != nil {
					b.Fatal(err)
				}
			}
			if _, _, err := sw.Finish(); err != nil {
				b.Fatal(err)
			}
			sw.Remove()
			d += time.Since(t0)
		}
		report(b, d)
	})
}

// benchPseudonymizer pseudonymizes under a key made for the benchmark.
func benchPseudonymizer() (*anonymize.Pseudonymizer, error) {
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		return nil, err
	}
	sk, err := anonymize.NewProjectKey(mk, "bench")
	if err != nil {
		return nil, err
	}
	return anonymize.OpenProjectKey(mk, "bench", sk)
}
