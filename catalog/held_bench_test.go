package catalog

import (
	"bufio"
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"slices"
	"strconv"
	"syscall"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
)

// BenchmarkHeldSeries ingests thirty nightly uploads of overlapping 7-day
// windows (FLOWCAT_BENCH_PER_DAY events a day, default 20,000; 3% late by
// 1-3 nights, 0.1% corrected, 0.05% sent twice) into one dataset, and
// reports the ingest time and peak heap of the first night whose upload
// is a full window (night 7, six days of history) and of the last (29
// days of history), with their ratios: a nightly upload's cost must not
// grow with the dataset's history. FLOWCAT_BENCH_IDENTITY=event_id runs it
// with a stable event_id and corrections taken.
func BenchmarkHeldSeries(b *testing.B) {
	perDay := 20000
	if s := os.Getenv("FLOWCAT_BENCH_PER_DAY"); s != "" {
		v, err := strconv.Atoi(s)
		if err != nil || v <= 0 {
			b.Fatalf("FLOWCAT_BENCH_PER_DAY=%q", s)
		}
		perDay = v
	}
	// FLOWCAT_BENCH_IDENTITY=event_id: a stable event_id, corrections
	// taken (the comparison then holds 24 hours of events either side).
	stable := os.Getenv("FLOWCAT_BENCH_IDENTITY") == "event_id"
	o := seriesOpt{Seed: 9, Nights: 30, PerDay: perDay, Window: 7, Late: 0.03, Correct: 0.001, Copies: 0.0005}
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	first := o.Window - 1
	var tFirst, tLast time.Duration
	var pFirst, pLast, pMin, pMax uint64
	times := make([]time.Duration, o.Nights)
	cpus := make([]time.Duration, o.Nights)
	// A low GC target, so that the sampled peak follows live memory
	// rather than the collector's pacing.
	defer debug.SetGCPercent(debug.SetGCPercent(20))
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
		spec := DatasetSpec{Project: "bench", Name: "nightly"}
		if stable {
			spec.Profile, spec.Changes = []byte(stableProfile), ChangesCorrect
		}
		if _, err := s.CreateDataset(ctx, spec, "bench"); err != nil {
			b.Fatal(err)
		}
		pMin, pMax = ^uint64(0), 0
		for n := 0; n < o.Nights; n++ {
			path := filepath.Join(dir, "night.csv")
			writeNight(b, o, n, path)
			f, err := os.Open(path)
			if err != nil {
				b.Fatal(err)
			}
			runtime.GC()
			stop := heapPeak()
			b.StartTimer()
			t0, c0 := time.Now(), cpuTime()
			res, err := s.Ingest(ctx, "bench", "nightly", bufio.NewReaderSize(f, 1<<16), IngestOptions{Filename: "night.csv"})
			el, cpu := time.Since(t0), cpuTime()-c0
			b.StopTimer()
			peak := stop()
			f.Close()
			if err != nil {
				b.Fatal(err)
			}
			ev := res.Upload.Events
			if ev.Read != ev.New+ev.Held+ev.Copies+ev.Changed {
				b.Fatalf("night %d: counts %+v", n, ev)
			}
			if n >= first {
				pMin, pMax = min(pMin, peak), max(pMax, peak)
			}
			times[n], cpus[n] = el, cpu
			switch n {
			case first:
				tFirst, pFirst = el, peak
			case o.Nights - 1:
				tLast, pLast = el, peak
			}
			fmt.Fprintf(os.Stderr, "night %2d: %7d rows, %s, %.0f ms (CPU %.0f ms), peak heap %.1f MB, version rows %d\n",
				n, ev.Read, ev.Sentence(res.Upload.Version), float64(el.Microseconds())/1000, float64(cpu.Microseconds())/1000, float64(peak)/(1<<20), versionRows(res))
		}
		s.Close()
		os.RemoveAll(dir)
		b.StartTimer()
	}
	b.ReportMetric(tFirst.Seconds(), "night7-s")
	b.ReportMetric(tLast.Seconds(), "night30-s")
	b.ReportMetric(tLast.Seconds()/tFirst.Seconds(), "last/first-time")
	// A single night's time is noisy on a shared machine: also the median
	// of the first five full-window nights against the last five.
	med := func(ts []time.Duration) float64 {
		s := slices.Clone(ts)
		slices.Sort(s)
		return s[len(s)/2].Seconds()
	}
	b.ReportMetric(med(times[o.Nights-5:])/med(times[first:first+5]), "last5/first5-median-time")
	// CPU time of the process (all its threads) is less sensitive to other
	// work on the machine than wall time.
	b.ReportMetric(cpus[o.Nights-1].Seconds()/cpus[first].Seconds(), "last/first-cpu")
	b.ReportMetric(med(cpus[o.Nights-5:])/med(cpus[first:first+5]), "last5/first5-median-cpu")
	b.ReportMetric(float64(pFirst)/(1<<20), "night7-peak-MB")
	b.ReportMetric(float64(pLast)/(1<<20), "night30-peak-MB")
	b.ReportMetric(float64(pMax)/float64(pMin), "max/min-peak")
}

// cpuTime is the user and system CPU time of the process so far.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

func versionRows(res *IngestResult) int64 {
	if res.Version == nil {
		return 0
	}
	return res.Version.Manifest.Rows
}

// writeNight writes night n's upload of o as CSV to path, streaming.
func writeNight(b *testing.B, o seriesOpt, n int, path string) {
	f, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	bw := bufio.NewWriterSize(f, 1<<16)
	w := csv.NewWriter(bw)
	w.Write(header[:])
	eachNightRow(o, n, func(r row) { w.Write(r[:]) })
	w.Flush()
	if err := w.Error(); err != nil {
		b.Fatal(err)
	}
	if err := bw.Flush(); err != nil {
		b.Fatal(err)
	}
	if err := f.Close(); err != nil {
		b.Fatal(err)
	}
}
