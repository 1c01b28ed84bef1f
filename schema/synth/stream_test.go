package synth

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"runtime"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

func readStream(t *testing.T, seed uint64, n int64, each func(line int, rec []string)) {
	t.Helper()
	r := csv.NewReader(NewStream(seed, n))
	r.ReuseRecord = true
	head, err := r.Read()
	if err != nil {
		t.Fatalf("header: %v", err)
	}
	if len(head) != len(StreamFields) {
		t.Fatalf("header %v", head)
	}
	for i, f := range StreamFields {
		if head[i] != string(f) {
			t.Fatalf("header column %d = %q, want %q", i, head[i], f)
		}
	}
	line := 0
	for {
		rec, err := r.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("row %d: %v", line+1, err)
		}
		line++
		each(line, rec)
	}
}

func TestStreamExactRows(t *testing.T) {
	for _, n := range []int64{0, 1, 7, 1000, 123_457} {
		t.Run(fmt.Sprint(n), func(t *testing.T) {
			rows := int64(0)
			readStream(t, 1, n, func(int, []string) { rows++ })
			if rows != n {
				t.Fatalf("%d rows, want %d", rows, n)
			}
		})
	}
}

func TestStreamDeterministic(t *testing.T) {
	a, _ := io.ReadAll(NewStream(9, 20_000))
	// Read the second copy through tiny reads: bytes must not depend on how the reader is drained.
	var b bytes.Buffer
	r := NewStream(9, 20_000)
	p := make([]byte, 7)
	for {
		n, err := r.Read(p)
		b.Write(p[:n])
		if err == io.EOF {
			break
		}
	}
	if !bytes.Equal(a, b.Bytes()) {
		t.Fatal("same seed gave different bytes")
	}
	c, _ := io.ReadAll(NewStream(10, 20_000))
	if bytes.Equal(a, c) {
		t.Fatal("different seeds gave the same bytes")
	}
}

func TestStreamShape(t *testing.T) {
	const n = 600_000
	distinct := make([]map[string]bool, len(StreamFields))
	for i := range distinct {
		distinct[i] = map[string]bool{}
	}
	col := func(f schema.Field) int {
		for i, g := range StreamFields {
			if g == f {
				return i
			}
		}
		panic(f)
	}
	var maxAt time.Time
	disorder, worst := 0, time.Duration(0)
	readStream(t, 3, n, func(line int, rec []string) {
		for _, f := range []schema.Field{schema.FieldSite, schema.FieldCaseID, schema.FieldSubjectID,
			schema.FieldResourceID, schema.FieldActivity, schema.FieldQueue, schema.FieldEventID} {
			if v := rec[col(f)]; v != "" {
				distinct[col(f)][v] = true
			}
		}
		if _, err := schema.ParseEventType(rec[col(schema.FieldEventType)]); err != nil {
			t.Fatalf("row %d: %v", line, err)
		}
		at, err := time.Parse(time.RFC3339, rec[col(schema.FieldOccurredAt)])
		if err != nil || at.Location() != time.UTC {
			t.Fatalf("row %d: occurred_at %q: %v", line, rec[col(schema.FieldOccurredAt)], err)
		}
		if at.Before(maxAt) {
			disorder++
			worst = max(worst, maxAt.Sub(at))
		} else {
			maxAt = at
		}
	})
	count := func(f schema.Field) int { return len(distinct[col(f)]) }
	if count(schema.FieldEventID) != n {
		t.Errorf("%d distinct event ids, want %d", count(schema.FieldEventID), n)
	}
	for _, tc := range []struct {
		f    schema.Field
		want float64
		tol  float64 // relative
	}{
		{schema.FieldCaseID, n / 6.0, 0.05},
		{schema.FieldSubjectID, n / 15.0, 0.05},
		{schema.FieldResourceID, 40, 0},
		{schema.FieldSite, 3, 0},
		{schema.FieldActivity, 5, 0},
		{schema.FieldQueue, 3, 0},
	} {
		if got := float64(count(tc.f)); math.Abs(got-tc.want) > tc.tol*tc.want {
			t.Errorf("%s: %v distinct, want %v (+-%.0f%%)", tc.f, got, tc.want, 100*tc.tol)
		}
	}
	// Roughly time-ordered: some rows are late, none by more than the jitter
	// (plus a second of timestamp truncation).
	if disorder == 0 || worst > streamJitterMs*time.Millisecond+time.Second {
		t.Errorf("%d rows out of order, worst by %v", disorder, worst)
	}
	t.Logf("%d out-of-order rows, worst %v; span %v", disorder, worst, maxAt.Sub(time.Unix(streamEpoch, 0)))
}

// maxOpen reads a stream twice: first the last row of every case, then the
// largest number of cases begun but not yet finished.
func maxOpen(t *testing.T, n int64) int {
	last := map[string]int{}
	readStream(t, 4, n, func(line int, rec []string) { last[rec[1]] = line })
	open, peak := map[string]bool{}, 0
	readStream(t, 4, n, func(line int, rec []string) {
		open[rec[1]] = true
		peak = max(peak, len(open))
		if last[rec[1]] == line {
			delete(open, rec[1])
		}
	})
	return peak
}

func TestStreamOpenCasesBounded(t *testing.T) {
	small, large := maxOpen(t, 50_000), maxOpen(t, 500_000)
	// Little's law: about 5 arrivals a minute x under 40 minutes a case.
	if large > 600 || float64(large) > 1.5*float64(small) {
		t.Errorf("open cases: %d at 50k rows, %d at 500k rows; want bounded", small, large)
	}
	t.Logf("peak open cases: %d (50k rows), %d (500k rows)", small, large)
}

// memWriter discards bytes and samples the heap every few writes.
type memWriter struct {
	writes   int
	peakHeap uint64
}

func (w *memWriter) Write(p []byte) (int, error) {
	w.writes++
	if w.writes%32 == 0 {
		var ms runtime.MemStats
		runtime.ReadMemStats(&ms)
		w.peakHeap = max(w.peakHeap, ms.HeapAlloc)
	}
	return len(p), nil
}

func TestStreamConstantMemory(t *testing.T) {
	runtime.GC()
	w := &memWriter{}
	n, err := io.Copy(w, NewStream(5, 2_000_000))
	if err != nil {
		t.Fatal(err)
	}
	if w.writes < 1000 {
		t.Fatalf("only %d writes (%d bytes): too few samples", w.writes, n)
	}
	if w.peakHeap > 8<<20 {
		t.Errorf("heap reached %d bytes while streaming 2M rows, want under 8 MiB", w.peakHeap)
	}
	t.Logf("%d bytes, %d writes, peak heap %d KiB", n, w.writes, w.peakHeap>>10)
}

func TestStreamHeaderMatchesSchema(t *testing.T) {
	var names []string
	for _, f := range StreamFields {
		names = append(names, string(f))
	}
	if StreamHeader != strings.Join(names, ",") {
		t.Fatalf("StreamHeader %q", StreamHeader)
	}
}

func BenchmarkNewStream(b *testing.B) {
	// One op is one event; reported events/s is the generation rate.
	var w countWriter
	if _, err := io.Copy(&w, NewStream(1, int64(b.N))); err != nil {
		b.Fatal(err)
	}
	b.SetBytes(w.n / int64(max(b.N, 1)))
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "events/s")
}

type countWriter struct{ n int64 }

func (w *countWriter) Write(p []byte) (int, error) { w.n += int64(len(p)); return len(p), nil }
