package catalog

import (
	"bytes"
	"cmp"
	"context"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"reflect"
	"runtime"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// TestSorterMergesNoMoreThanNeeded: with more runs than the fan-in, the
// merges before the last take only as many runs as it takes to leave
// fanIn, so the fewest events are written twice (5 runs, fan-in 4: the
// oldest 2, not 4; 11 runs: merges must remove 7 runs, at most 3 each, so
// three merges, of 4, 4 and 2 runs of 10 events, none merged twice: 100).
func TestSorterMergesNoMoreThanNeeded(t *testing.T) {
	for _, c := range []struct{ events, runs, remerged int }{{50, 5, 20}, {70, 7, 40}, {40, 4, 0}, {110, 11, 100}} {
		dir := t.TempDir()
		s := newSorter(dir, 10)
		s.fanIn = 4
		var in []schema.Event
		for i := range c.events {
			in = append(in, schema.Event{Site: "s", CaseID: fmt.Sprint("c", i%7), Type: schema.Start, Activity: "a",
				OccurredAt: genBase.Add(time.Duration((i*37)%c.events) * time.Second).UTC(), Line: int64(i + 2)})
		}
		for i := range in {
			if err := s.Add(&in[i]); err != nil {
				t.Fatal(err)
			}
		}
		if len(s.runs) != c.runs-1 { // Finish spills the last
			t.Fatalf("%d events: %d runs before Finish, want %d", c.events, len(s.runs), c.runs-1)
		}
		var out []schema.Event
		err := s.Finish(func(e *schema.Event) error {
			if len(out) == 0 {
				if ents, _ := os.ReadDir(dir); len(ents) > s.fanIn {
					t.Errorf("%d events: %d runs merged at once", c.events, len(ents))
				}
			}
			out = append(out, *e)
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
		if s.remerged != c.remerged {
			t.Errorf("%d events in %d runs, fan-in 4: %d events written again, want %d", c.events, c.runs, s.remerged, c.remerged)
		}
		if !slices.IsSortedFunc(out, func(a, b schema.Event) int { return lessEvent(&a, &b) }) || len(out) != len(in) {
			t.Errorf("%d events: %d out, or out of order", c.events, len(out))
		}
		if err := s.Close(); err != nil {
			t.Fatal(err)
		}
	}
}

// TestSorterRuns drives the sorter directly with a tiny run size, so that
// many runs are merged, and checks the order and the field round trip
// through the run format.
func TestSorterRuns(t *testing.T) {
	dir := t.TempDir()
	r := rand.New(rand.NewPCG(3, 4))
	var in []schema.Event
	for i := range 1000 {
		in = append(in, schema.Event{
			Site: "s" + string(rune('a'+r.IntN(3))), CaseID: "c" + string(rune('a'+r.IntN(26))),
			SubjectID: []string{"", "subj"}[r.IntN(2)], ResourceID: "res", Type: schema.Start,
			Activity: "act", Queue: "", OccurredAt: genBase.Add(time.Duration(r.IntN(50)) * time.Second).UTC(),
			Priority: "3", Channel: "phone", Outcome: "", EventID: "é-" + string(rune('0'+i%10)), Line: int64(i + 2),
		})
	}
	for _, c := range []struct{ max, fanIn int }{{3, 4}, {7, maxFanIn}, {7, 2}, {1000, maxFanIn}, {5000, maxFanIn}} {
		max := c.max
		s := newSorter(dir, max)
		s.fanIn = c.fanIn
		for i := range in {
			if err := s.Add(&in[i]); err != nil {
				t.Fatal(err)
			}
		}
		wantRuns := (len(in) - 1) / max // the last buffer is spilled by Finish
		if len(s.runs) != wantRuns {
			t.Errorf("max %d: %d runs, want %d", max, len(s.runs), wantRuns)
		}
		var out []schema.Event
		err := s.Finish(func(e *schema.Event) error {
			if len(out) == 0 {
				// The final merge has at most fanIn runs open.
				if ents, _ := os.ReadDir(dir); len(ents) > c.fanIn {
					t.Errorf("max %d, fan-in %d: %d runs merged at once", max, c.fanIn, len(ents))
				}
			}
			out = append(out, *e)
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
		want := slices.Clone(in)
		slices.SortFunc(want, func(a, b schema.Event) int { return lessEvent(&a, &b) })
		if len(out) != len(want) {
			t.Fatalf("max %d: %d events out of %d", max, len(out), len(want))
		}
		for i := range out {
			if out[i] != want[i] {
				t.Fatalf("max %d: event %d = %+v, want %+v", max, i, out[i], want[i])
			}
		}
		if err := s.Close(); err != nil {
			t.Fatal(err)
		}
		if ents, _ := os.ReadDir(dir); len(ents) != 0 {
			t.Fatalf("max %d: Close left %d files", max, len(ents))
		}
	}
	// A run cut short is an error, not a silent end.
	s := newSorter(dir, 10)
	defer s.Close()
	for i := range 20 {
		s.Add(&in[i])
	}
	if err := s.wait(); err != nil { // the run is written in the background
		t.Fatal(err)
	}
	fi, _ := s.runs[0].Stat()
	if err := s.runs[0].Truncate(fi.Size() - 3); err != nil {
		t.Fatal(err)
	}
	err := s.Finish(func(*schema.Event) error { return nil })
	if err == nil {
		t.Error("a truncated run merged without error")
	}
	// An error from fn stops the merge and is returned as is.
	s2 := newSorter(dir, 10)
	defer s2.Close()
	for i := range 20 {
		s2.Add(&in[i])
	}
	stop := errors.New("stop")
	if err := s2.Finish(func(*schema.Event) error { return stop }); err != stop {
		t.Errorf("Finish = %v, want the callback's error", err)
	}
}

// TestCaseSorterRuns: a sorter by case gives cases.Less's order, held in
// memory or spilled into runs, on events built to tie: case ids that share
// their first 8 bytes or are prefixes of each other (the key's prefix
// ties), few instants and types (the key ties whole, and the records are
// decoded and compared by cases.Less), and equal rows with different
// content or lines.
func TestCaseSorterRuns(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	// Ids that tie in the key's words (the first 32 bytes, zero-padded):
	// prefixes of each other, a zero byte where the padding is, and ids
	// alike for 32 bytes or more.
	w32 := "abcdefghijklmnopqrstuvwxyz012345"
	ids := []string{"case-0001", "case-0001x", "case-0002", "case-00", "c", "", "case-0001\x00", "zz-longer-than-eight",
		w32, w32[:31], w32 + "\x00", w32 + "a", w32 + "b", w32 + "a\x00", w32[:31] + "\x00", w32[:24] + "\x00\x00"}
	types := []schema.EventType{schema.Arrival, schema.Start, schema.Complete, schema.Departure}
	var in []schema.Event
	for range 3000 {
		in = append(in, schema.Event{
			Site: []string{"north", "south"}[r.IntN(2)], CaseID: ids[r.IntN(len(ids))], SubjectID: []string{"", "subj"}[r.IntN(2)],
			ResourceID: []string{"", "res-1", "res-2"}[r.IntN(3)], Type: types[r.IntN(len(types))], Activity: []string{"a", "b"}[r.IntN(2)],
			OccurredAt: genBase.Add(time.Duration(r.IntN(4))*time.Second + time.Duration(r.IntN(2))*time.Microsecond).UTC(),
			Row:        int64(r.IntN(3)), Outcome: []string{"", "done"}[r.IntN(2)], Attrs: []string{"", `{"k":"v"}`}[r.IntN(2)],
			Line: int64(2 + r.IntN(1500)), // repeated lines: some events tie on everything but content
		})
	}
	want := slices.Clone(in)
	slices.SortStableFunc(want, func(a, b schema.Event) int { return cases.Less(&a, &b) })
	for _, max := range []int{5000, 1000, 7} {
		s := newCaseSorter(t.TempDir(), max)
		for i := range in {
			if err := s.Add(&in[i]); err != nil {
				t.Fatal(err)
			}
		}
		var out []schema.Event
		if err := s.Finish(func(e *schema.Event) error { out = append(out, *e); return nil }); err != nil {
			t.Fatal(err)
		}
		if len(out) != len(want) {
			t.Fatalf("max %d: %d events out of %d", max, len(out), len(want))
		}
		for i := range out {
			if out[i] != want[i] {
				t.Fatalf("max %d: event %d = %+v, want %+v", max, i, out[i], want[i])
			}
		}
		s.Close()
	}
}

// TestCaseSorterTieDamaged: a record that does not decode when two keys
// tie (the fallback to cases.Less) is an error of the sort, not a panic
// of the goroutine that spills.
func TestCaseSorterTieDamaged(t *testing.T) {
	s := newCaseSorter(t.TempDir(), 10)
	defer s.Close()
	var b runBuf
	for i := range 2 {
		b.add(&schema.Event{Site: "s", CaseID: "case-1", Type: schema.Start, OccurredAt: genBase, Line: int64(i + 2)}, true)
	}
	b.recs[len(b.recs)-1] = 5 // the last record's attributes: 5 bytes past its end
	if _, err := s.order(&b, &s.work); !errors.Is(err, errRunRecord) {
		t.Fatalf("order of a damaged record = %v, want errRunRecord", err)
	}
}

// TestSpillDeterminism ingests one shuffled file with a run size that
// spills about fifty runs and with one that spills none: the snapshot
// files must be byte-identical and time-sorted.
func TestSpillDeterminism(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 100 })
	e.dataset(t, "p", "spill", nil)
	e.dataset(t, "p", "mem", nil)
	data := genCSV(genOpt{Seed: 5, N: 5000, Shuffle: true, Coarse: true})
	r1 := e.ingest(t, "p", "spill", data, "")
	e.assertTempEmpty(t)
	e.open(t, func(o *Options) { o.RunEvents = 1 << 16 }) // same bbolt file, same project key
	r2 := e.ingest(t, "p", "mem", data, "")
	a := e.blobBytes(t, r1.Version.Manifest.Files[0].SHA256)
	b := e.blobBytes(t, r2.Version.Manifest.Files[0].SHA256)
	if !bytes.Equal(a, b) {
		t.Fatalf("spilled and in-memory sorts give other files (%d and %d bytes)", len(a), len(b))
	}
	evs := readEvents(t, a)
	if len(evs) != 5000 {
		t.Fatalf("%d events", len(evs))
	}
	if !slices.IsSortedFunc(evs, func(x, y schema.Event) int { return x.OccurredAt.Compare(y.OccurredAt) }) {
		t.Error("snapshot not sorted by occurred_at")
	}
	e.assertTempEmpty(t)
}

// cancelAfter cancels a context once n bytes have been read through it.
type cancelAfter struct {
	r      io.Reader
	n      int
	cancel context.CancelFunc
}

func (c *cancelAfter) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n -= n
	if c.n <= 0 {
		c.cancel()
	}
	return n, err
}

// TestTempFilesRemoved checks that no sort run or Parquet file stays in the
// temp dir after an ingest that fails half-way: a file error deep in the
// file (a truncated gzip stream) and a cancelled context.
func TestTempFilesRemoved(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 100 })
	e.dataset(t, "p", "d", nil)
	ctx := context.Background()
	data := genCSV(genOpt{Seed: 6, N: 10000, Shuffle: true})

	gz := gzipBytes(data)
	res, err := e.s.Ingest(ctx, "p", "d", bytes.NewReader(gz[:len(gz)*3/4]), IngestOptions{Filename: "cut.csv.gz"})
	fe, ok := schema.AsFileError(err)
	if !errors.Is(err, ErrFileInvalid) || !ok || fe.Rule != schema.RuleCompression {
		t.Fatalf("truncated gzip: %v", err)
	}
	// (The CSV reader reports no line for a stream error; the cut is at
	// three quarters of the compressed bytes, long after the first spills.)
	if res == nil || res.Upload.Status != UploadFailed || res.Upload.Error == nil || res.Upload.Error.Rule != schema.RuleCompression {
		t.Errorf("result = %+v", res)
	}
	e.assertTempEmpty(t)

	// Bytes that are not UTF-8 in the 8000th row.
	bad := bytes.Replace(data, []byte("ev-7998\n"), []byte("ev-\xff\n"), 1)
	if bytes.Equal(bad, data) {
		t.Fatal("test file lacks event id ev-7998")
	}
	_, err = e.s.Ingest(ctx, "p", "d", bytes.NewReader(bad), IngestOptions{Filename: "latin1.csv"})
	fe, ok = schema.AsFileError(err)
	if !errors.Is(err, ErrFileInvalid) || !ok || fe.Rule != schema.RuleEncoding || fe.Line < 8000 {
		t.Fatalf("bad encoding at row 8000: %v", err)
	}
	e.assertTempEmpty(t)

	cctx, cancel := context.WithCancel(ctx)
	defer cancel()
	src := &cancelAfter{r: bytes.NewReader(data), n: len(data) / 2, cancel: cancel}
	_, err = e.s.Ingest(cctx, "p", "d", src, IngestOptions{})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled ingest: %v", err)
	}
	e.assertTempEmpty(t)
	if vs, _ := e.s.Versions(ctx, "p", "d"); len(vs) != 0 {
		t.Errorf("versions after failures: %+v", vs)
	}
	if ids := e.blobIDs(t); len(ids) != 0 {
		t.Errorf("blobs after failures: %v", ids)
	}
	// The store still works.
	e.ingest(t, "p", "d", data, "")
	e.assertTempEmpty(t)
}

// TestSorterSpillsWideRows: the buffer is bounded by bytes as well as by
// events, so rows with long text spill before the event count is reached.
func TestSorterSpillsWideRows(t *testing.T) {
	s := newSorter(t.TempDir(), 1<<16)
	defer s.Close()
	wide := strings.Repeat("x", 1<<20)
	for i := 0; i < 100; i++ {
		e := schema.Event{Site: "s", CaseID: "c", Type: schema.Arrival, Activity: wide, Line: int64(i + 2),
			OccurredAt: time.Unix(int64(1000-i), 0).UTC()}
		if err := s.Add(&e); err != nil {
			t.Fatal(err)
		}
	}
	if len(s.runs) == 0 {
		t.Fatalf("100 MiB of rows held in memory without a spill (limit %d MiB)", maxRunBytes>>20)
	}
	var prev time.Time
	n := 0
	err := s.Finish(func(e *schema.Event) error {
		if e.OccurredAt.Before(prev) || len(e.Activity) != 1<<20 {
			t.Fatalf("event %d out of order or damaged", n)
		}
		prev = e.OccurredAt
		n++
		return nil
	})
	if err != nil || n != 100 {
		t.Fatalf("Finish: %v, %d events", err, n)
	}
	if len(s.inter) > 0 {
		for k := range s.inter {
			if len(k) > internMaxLen {
				t.Fatalf("interned a %d-byte value", len(k))
			}
		}
	}
}

// TestPrefix8Order: where two strings' 8-byte prefixes differ, they order
// the strings as strings.Compare does (the case sort's shortcut), for
// short, long, empty and shared-prefix strings.
func TestPrefix8Order(t *testing.T) {
	r := rand.New(rand.NewPCG(8, 8))
	alphabet := "\x00\x01az09\xff"
	word := func() string {
		b := make([]byte, r.IntN(12))
		for i := range b {
			b[i] = alphabet[r.IntN(len(alphabet))]
		}
		return string(b)
	}
	decided := 0
	for range 200_000 {
		a, b := word(), word()
		pa, pb := prefix8(a), prefix8(b)
		if pa == pb {
			continue
		}
		decided++
		if got, want := cmp.Compare(pa, pb), strings.Compare(a, b); got != want {
			t.Fatalf("%q vs %q: prefixes order %d, strings %d", a, b, got, want)
		}
	}
	if decided < 100_000 {
		t.Fatalf("only %d of 200000 pairs decided by the prefix", decided)
	}
}

// TestRunRecords: events of every record size (under 128 bytes, over it,
// and over the reader's buffer, which takes the copying path) come back
// from a framed run field for field; a run cut inside a record, or a
// record whose length disagrees with its fields, is an error, not a
// short or wrong event.
func TestRunRecords(t *testing.T) {
	at := time.Date(2026, 3, 1, 8, 0, 0, 123456000, time.UTC)
	var evs []schema.Event
	for i, attrs := range []int{0, 1, 90, 200, 20_000, 70_000} {
		evs = append(evs, schema.Event{Site: "north", CaseID: "c" + strings.Repeat("x", i), SubjectID: "s1", ResourceID: "desk 2",
			Type: schema.Start, Activity: "triage", Queue: "q", OccurredAt: at.Add(time.Duration(i) * time.Second),
			Priority: "2", Channel: "walk-in", Outcome: "served", EventID: "e", InstanceID: "i", Line: int64(1 << (8 * i)),
			Attrs: strings.Repeat("a", attrs)})
	}
	var buf bytes.Buffer
	w := newRunWriter(&buf)
	var enc []byte
	for i := range evs {
		enc = encodeEvent(enc[:0], &evs[i])
		if _, err := w.Write(enc); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	read := func(b []byte) ([]schema.Event, error) {
		r := &run{r: newRunReader(bytes.NewReader(b)), inter: map[string]string{}}
		var got []schema.Event
		for {
			ok, err := r.next()
			if err != nil || !ok {
				return got, err
			}
			got = append(got, r.ev)
		}
	}
	got, err := read(buf.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != len(evs) {
		t.Fatalf("read %d events, wrote %d", len(got), len(evs))
	}
	for i := range evs {
		if !reflect.DeepEqual(got[i], evs[i]) {
			t.Errorf("event %d: got %+v\nwant %+v", i, got[i], evs[i])
		}
	}

	// Damaged records framed afresh: the frames check out, the records not.
	plain := func(recs ...[]byte) []byte {
		var b bytes.Buffer
		w := newRunWriter(&b)
		for _, r := range recs {
			w.Write(r)
		}
		w.Close()
		return b.Bytes()
	}
	one := encodeEvent(nil, &evs[2])
	if _, err := read(plain(one[:len(one)-5])); !errors.Is(err, io.ErrUnexpectedEOF) {
		t.Errorf("a run cut inside a record: %v, want ErrUnexpectedEOF", err)
	}
	long := append([]byte{one[0] + 1}, append(one[1:], 0)...) // one byte the fields do not use
	if _, err := read(plain(long)); !errors.Is(err, errRunRecord) {
		t.Errorf("a record longer than its fields: %v, want errRunRecord", err)
	}
}

// TestRunWriteFailureEndsGoroutines: a run that cannot be written (its
// file closed under it) fails, and the framing's goroutines end with it.
func TestRunWriteFailureEndsGoroutines(t *testing.T) {
	before := runtime.NumGoroutine()
	s := newSorter(t.TempDir(), 1<<20)
	f, err := os.CreateTemp(t.TempDir(), "run-*")
	if err != nil {
		t.Fatal(err)
	}
	f.Close()
	var buf runBuf
	for i := range 5000 {
		buf.add(&schema.Event{Site: "north", CaseID: fmt.Sprintf("case-%06d", i), Type: schema.Arrival,
			OccurredAt: time.Unix(int64(i), 0).UTC(), Line: int64(i + 2), Attrs: strings.Repeat("x", 40)}, false)
	}
	if err := s.writeRun(f, &buf, &s.work); err == nil {
		t.Fatal("writing a run to a closed file succeeded")
	}
	deadline := time.Now().Add(5 * time.Second)
	for runtime.NumGoroutine() > before && time.Now().Before(deadline) {
		time.Sleep(10 * time.Millisecond)
	}
	if n := runtime.NumGoroutine(); n > before {
		t.Errorf("%d goroutines after a failed run, %d before", n, before)
	}
}
