package catalog

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"maps"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"

	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
	"github.com/flowcat-catalog/flowcat/schema/synth"
)

// caseTable reads a version's case table with Apache Arrow's Parquet
// reader, an implementation independent of the writer.
func (e *env) caseTable(t testing.TB, v *Version) arrow.Table {
	t.Helper()
	if v.Manifest.CaseTable == nil {
		t.Fatalf("version %d has no case table", v.Number)
	}
	b := e.blobBytes(t, v.Manifest.CaseTable.SHA256)
	pf, err := file.NewParquetReader(bytes.NewReader(b))
	if err != nil {
		t.Fatalf("arrow cannot open the case table: %v", err)
	}
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 1 << 14}, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	tbl, err := fr.ReadTable(context.Background())
	if err != nil {
		t.Fatalf("arrow cannot read the case table: %v", err)
	}
	t.Cleanup(tbl.Release)
	return tbl
}

// arrowCases is a case table as read by arrow: per row, the case id,
// events and duration in microseconds, and which nullable columns are
// null.
type arrowCase struct {
	id       string
	events   int64
	duration int64
	nulls    string // one letter per nullable column: n null, v valid
	variant  string
}

func readArrowCases(t testing.TB, tbl arrow.Table) []arrowCase {
	t.Helper()
	col := func(name string) *arrow.Chunked {
		idx := tbl.Schema().FieldIndices(name)
		if len(idx) != 1 {
			t.Fatalf("case table has no single %s column: %v", name, tbl.Schema())
		}
		return tbl.Column(idx[0]).Data()
	}
	nullable := []string{"subject_id", "arrival_at", "start_at", "end_at", "wait_seconds", "service_seconds", "stay_seconds"}
	var out []arrowCase
	ids, evs, fs, ls := col("case_id").Chunks(), col("events").Chunks(), col("first_at").Chunks(), col("last_at").Chunks()
	for k := range ids {
		id := ids[k].(*array.String)
		ev := evs[k].(*array.Int64)
		f := fs[k].(*array.Timestamp)
		l := ls[k].(*array.Timestamp)
		for i := 0; i < id.Len(); i++ {
			c := arrowCase{id: id.Value(i), events: ev.Value(i), duration: int64(l.Value(i)) - int64(f.Value(i)),
				variant: col("variant").Chunks()[k].ValueStr(i)}
			for _, n := range nullable {
				if col(n).Chunks()[k].IsNull(i) {
					c.nulls += "n"
				} else {
					c.nulls += "v"
				}
			}
			out = append(out, c)
		}
	}
	return out
}

// idleRows are cases that idle 40 and 400 days between their events: an
// arrival, a start 40 days later, a complete, and a departure 400 days
// after that.
func idleRows(n int) []row {
	var out []row
	for i := range n {
		at := genBase.Add(time.Duration(i) * 7 * time.Minute)
		id := fmt.Sprintf("IDLE-%05d", i)
		for _, s := range []struct {
			typ string
			d   time.Duration
		}{{"arrival", 0}, {"start", 40 * 24 * time.Hour}, {"complete", 40*24*time.Hour + 20*time.Minute}, {"departure", 440*24*time.Hour + 20*time.Minute}} {
			out = append(out, row{"north", id, "P" + id, "R-1", s.typ, "visit", "q1", at.Add(s.d).Format(time.RFC3339Nano), "", "", "", ""})
		}
	}
	slices.SortStableFunc(out, func(a, b row) int { return strings.Compare(a[7], b[7]) })
	return out
}

// TestCasesWholeAcrossIdleAndUploads: a case is its id, however long it
// idles and however many uploads its events come in. The same events as
// one file and as 12 nightly appends give one case each and identical
// case tables (byte for byte), summaries and case-level quality figures.
func TestCasesWholeAcrossIdleAndUploads(t *testing.T) {
	const n = 300
	rows := idleRows(n)
	e := newEnv(t, func(o *Options) { o.RunEvents = 200 }) // spill the sorts
	e.dataset(t, "p", "whole", nil)
	e.dataset(t, "p", "nightly", nil)
	one := e.ingest(t, "p", "whole", csvBytes(header, rows), "all.csv").Version

	// Twelve appends, cut by time.
	var last *Version
	per := (len(rows) + 11) / 12
	for i := 0; i < len(rows); i += per {
		part := rows[i:min(i+per, len(rows))]
		last = e.ingest(t, "p", "nightly", csvBytes(header, part), fmt.Sprintf("night-%02d.csv", i/per)).Version
	}
	if len(last.Manifest.Files) != 12 {
		t.Fatalf("nightly version has %d files, want 12", len(last.Manifest.Files))
	}
	for _, v := range []*Version{one, last} {
		cs := readArrowCases(t, e.caseTable(t, v))
		if len(cs) != n {
			t.Errorf("v%d: %d case rows, want %d", v.Number, len(cs), n)
		}
		want := (440*24*time.Hour + 20*time.Minute).Microseconds()
		for _, c := range cs {
			if c.events != 4 || c.duration != want {
				t.Errorf("v%d: case %s has %d events over %d µs, want 4 over %d", v.Number, c.id, c.events, c.duration, want)
				break
			}
		}
		if q := e.report(t, v); q.Cases.Count != n || q.Stages.Cases != n || q.Stages.Departure != 1 {
			t.Errorf("v%d: report cases %+v stages %+v, want %d cases, all departed", v.Number, q.Cases, q.Stages, n)
		}
	}
	if a, b := e.blobBytes(t, one.Manifest.CaseTable.SHA256), e.blobBytes(t, last.Manifest.CaseTable.SHA256); !bytes.Equal(a, b) {
		t.Error("the case tables of one file and of 12 appends differ")
	}
	ctx := context.Background()
	s1, err := e.s.Summary(ctx, "p/whole", one.Number)
	if err != nil {
		t.Fatal(err)
	}
	s12, err := e.s.Summary(ctx, "p/nightly", last.Number)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(s1, s12) {
		t.Errorf("summaries differ:\n%.600s\n%.600s", s1, s12)
	}
	var sum summary.Summary
	if err := json.Unmarshal(s12, &sum); err != nil {
		t.Fatal(err)
	}
	if sum.Cases.Value != n || !sum.Cases.Exact || sum.LengthOfStay.N != n {
		t.Errorf("summary cases %+v stays %d, want %d exact", sum.Cases, sum.LengthOfStay.N, n)
	}
	q1, q12 := e.report(t, one), e.report(t, last)
	if q1.Cases != q12.Cases || q1.Stages != q12.Stages || !slices.Equal(q1.Waits, q12.Waits) {
		t.Errorf("case-level quality differs:\n%+v %+v\n%+v %+v", q1.Cases, q1.Stages, q12.Cases, q12.Stages)
	}
	for i := range q1.Raw.Sites {
		if a, b := q1.Raw.Sites[i].Census, q12.Raw.Sites[i].Census; a.Entries != b.Entries || a.Exits != b.Exits || a.StayedSeconds != b.StayedSeconds || a.SpanSeconds != b.SpanSeconds || a.AreaCaseSeconds != b.AreaCaseSeconds {
			t.Errorf("census sums differ: %+v vs %+v", a, b)
		}
	}
}

// TestExactCounts: case, subject and resource counts are exact, not
// estimates, through the real ingest.
func TestExactCounts(t *testing.T) {
	for _, n := range []int{5000, 50000} {
		t.Run(fmt.Sprint(n), func(t *testing.T) {
			e := newEnv(t, func(o *Options) { o.RunEvents = 8192 })
			e.dataset(t, "p", "d", nil)
			var b bytes.Buffer
			b.WriteString("site,case_id,subject_id,resource_id,event_type,occurred_at\n")
			for i := range n {
				// n cases, n/2 subjects (two visits each), n/10 resources
				fmt.Fprintf(&b, "s,C%07d,S%07d,R%05d,arrival,%s\n", i, i/2, i%(n/10), genBase.Add(time.Duration(i)*time.Second).Format(time.RFC3339))
			}
			v := e.ingest(t, "p", "d", b.Bytes(), "n.csv").Version
			js, err := e.s.Summary(context.Background(), "p/d", v.Number)
			if err != nil {
				t.Fatal(err)
			}
			var s summary.Summary
			if err := json.Unmarshal(js, &s); err != nil {
				t.Fatal(err)
			}
			if s.Cases.Value != float64(n) || s.Subjects.Value != float64(n/2) || s.Resources.Value != float64(n/10) || !s.Cases.Exact || !s.Subjects.Exact || !s.Resources.Exact {
				t.Errorf("counts %+v %+v %+v, want %d, %d, %d exact", s.Cases, s.Subjects, s.Resources, n, n/2, n/10)
			}
			if v.Manifest.CaseTable.Rows != int64(n) || e.report(t, v).Cases.Count != int64(n) {
				t.Errorf("case table %d rows, report %d cases, want %d", v.Manifest.CaseTable.Rows, e.report(t, v).Cases.Count, n)
			}
		})
	}
}

// TestExactCountsTwoMillion runs the per-case pass alone over 2,000,000
// cases with small runs and a small counting budget, so that the sort and
// the distinct counts spill to disk many times.
func TestExactCountsTwoMillion(t *testing.T) {
	if testing.Short() || raceEnabled {
		t.Skip("2M cases: not in -short or under the race detector")
	}
	const n = 2_000_000
	dir := t.TempDir()
	cp := NewCasePass(dir, 1<<16)
	cp.subjects = newDistinctCounter(dir, 1<<20)
	cp.resources = newDistinctCounter(dir, 1<<20)
	defer cp.Close()
	var e schema.Event
	for i := range n {
		e.CaseID = fmt.Sprintf("C%08d", (i*7919)%n) // a permutation: out of order
		e.SubjectID = fmt.Sprintf("S%08d", (i*7919)%n/4)
		e.ResourceID = fmt.Sprintf("R%04d", i%1000)
		e.Site, e.Type = "s", "arrival"
		e.OccurredAt = genBase.Add(time.Duration(i) * time.Second)
		if err := cp.Add(&e); err != nil {
			t.Fatal(err)
		}
	}
	var rc countRecords
	got, err := cp.Run(&rc)
	if err != nil {
		t.Fatal(err)
	}
	if got != (summary.Counts{Cases: n, Subjects: n / 4, Resources: 1000}) || rc.n != n || rc.unsorted {
		t.Errorf("counts %+v, %d records (sorted %v), want %d cases, %d subjects, 1000 resources", got, rc.n, !rc.unsorted, n, n/4)
	}
	if err := cp.Close(); err != nil {
		t.Fatal(err)
	}
	if ents, _ := os.ReadDir(dir); len(ents) != 0 {
		t.Errorf("%d temporary files left", len(ents))
	}
}

// countRecords counts the records the pass yields and checks they come in
// case order, once each.
type countRecords struct {
	n        int64
	last     string
	unsorted bool
}

func (c *countRecords) Event(*schema.Event)    {}
func (c *countRecords) Wait(*cases.Wait)       {}
func (c *countRecords) Service(*cases.Service) {}
func (c *countRecords) Case(r *cases.Record) {
	if c.n > 0 && r.CaseID <= c.last {
		c.unsorted = true
	}
	c.n++
	c.last = r.CaseID
}

// patientsCSV returns the shared "patients" log (testdata/patients).
func patientsCSV(t testing.TB) []byte {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", "patients", "patients.csv.gz"))
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestPatientsLog checks the case and service figures of the artificial
// "patients" log (testdata/patients/README.md) against the README and an
// independent computation with the standard library.
func TestPatientsLog(t *testing.T) {
	data := patientsCSV(t)
	prof, err := os.ReadFile(filepath.Join("..", "testdata", "patients", "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	e := newEnv(t, func(o *Options) { o.RunEvents = 1000 })
	e.dataset(t, "p", "patients", func(s *DatasetSpec) { s.Profile = prof })
	res := e.ingest(t, "p", "patients", data, "patients.csv.gz")
	v := res.Version

	// Independent: per case first/last, per handling_id start/complete.
	zr, err := gzip.NewReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	cr := csv.NewReader(zr)
	head, err := cr.Read()
	if err != nil {
		t.Fatal(err)
	}
	idx := func(name string) int { return slices.Index(head, name) }
	type span struct{ lo, hi time.Time }
	spans := map[string]*span{}
	type inst struct {
		act, cse     string
		start, compl *time.Time
	}
	insts := map[string]*inst{}
	// (case, instant) -> the (type, activity) pairs there, for the
	// same-instant checks.
	type caseAt struct {
		c  string
		at time.Time
	}
	atInstant := map[caseAt][][2]string{}
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		ts, err := time.Parse(time.RFC3339, rec[idx("time")])
		if err != nil {
			t.Fatal(err)
		}
		c := rec[idx("patient")]
		k := caseAt{c, ts}
		atInstant[k] = append(atInstant[k], [2]string{rec[idx("registration_type")], rec[idx("handling")]})
		if s := spans[c]; s == nil {
			spans[c] = &span{ts, ts}
		} else {
			if ts.Before(s.lo) {
				s.lo = ts
			}
			if ts.After(s.hi) {
				s.hi = ts
			}
		}
		in := insts[rec[idx("handling_id")]]
		if in == nil {
			in = &inst{act: rec[idx("handling")], cse: rec[idx("patient")]}
			insts[rec[idx("handling_id")]] = in
		}
		if rec[idx("registration_type")] == "start" {
			in.start = &ts
		} else {
			in.compl = &ts
		}
	}
	var total float64
	var durs []int64
	for _, s := range spans {
		d := s.hi.Sub(s.lo)
		total += d.Seconds()
		durs = append(durs, d.Microseconds())
	}
	mean := total / float64(len(spans))
	// README: 500 cases, mean case duration 576832.972 s.
	if len(spans) != 500 || math.Abs(mean-576832.972) > 5e-4 {
		t.Fatalf("independent reading: %d cases, mean %.4f s; README: 500, 576832.972 s", len(spans), mean)
	}
	q := e.report(t, v)
	if q.Cases.Count != 500 || math.Abs(q.Cases.MeanDurationSeconds-576832.972) > 5e-4 || q.Cases.MaxDurationSeconds != 1996424 {
		t.Errorf("report cases %+v, want 500, mean 576832.972 s, max 1996424 s (README)", q.Cases)
	}
	if ur := res.Upload.Report; ur.Cases != q.Cases {
		t.Errorf("upload report cases %+v, version's %+v", ur.Cases, q.Cases)
	}
	// Same instant: every event after the first at one instant of a case.
	// Same-instant order: those that bound one interval with an event
	// there, a start and a complete of one activity (a complete of one
	// step with the start of the next is a handover).
	var sameAt, sameOrder int64
	for _, evs := range atInstant {
		sameAt += int64(len(evs) - 1)
		for i := 1; i < len(evs); i++ {
			for _, p := range evs[:i] {
				if p[1] == evs[i][1] && p[0] != evs[i][0] {
					sameOrder++
					break
				}
			}
		}
	}
	if got, want := q.Count(quality.CodeSameInstant), sameAt; got != want {
		t.Errorf("same_instant %d, independent count %d", got, want)
	}
	if got, want := q.Count(quality.CodeSameInstantOrder), sameOrder; got != want {
		t.Errorf("same_instant_order %d, independent count %d (start and complete of one activity at one instant)", got, want)
	}
	cs := readArrowCases(t, e.caseTable(t, v))
	var got []int64
	for _, c := range cs {
		got = append(got, c.duration)
	}
	sort.Slice(durs, func(i, j int) bool { return durs[i] < durs[j] })
	sort.Slice(got, func(i, j int) bool { return got[i] < got[j] })
	if !slices.Equal(got, durs) {
		t.Error("case table durations differ from the independent reading")
	}

	// Service per activity: the README's means, and the independent
	// pairing by handling_id.
	js, err := e.s.Summary(context.Background(), "p/patients", v.Number)
	if err != nil {
		t.Fatal(err)
	}
	var s summary.Summary
	if err := json.Unmarshal(js, &s); err != nil {
		t.Fatal(err)
	}
	readme := map[string]struct {
		n    uint64
		mean float64
	}{
		"Blood test": {237, 19928.802}, "Check-out": {492, 7426.417}, "Discuss Results": {495, 9992.733},
		"MRI SCAN": {236, 14939.169}, "Registration": {500, 9913.680}, "Triage and Assessment": {500, 47179.796}, "X-Ray": {261, 17445.724},
	}
	indep := map[string][]float64{}
	for _, in := range insts {
		if in.start != nil && in.compl != nil {
			indep[in.act] = append(indep[in.act], in.compl.Sub(*in.start).Seconds())
		}
	}
	if len(s.Activities) != len(readme) {
		t.Errorf("%d activities, want %d", len(s.Activities), len(readme))
	}
	for _, a := range s.Activities {
		w, ok := readme[a.Name]
		if !ok {
			t.Errorf("activity %q: unexpected or no service times", a.Name)
			continue
		}
		var sum float64
		for _, x := range indep[a.Name] {
			sum += x
		}
		im := sum / float64(len(indep[a.Name]))
		if a.Service.N != w.n || math.Abs(a.Service.Mean-w.mean) > 5e-4 || uint64(len(indep[a.Name])) != w.n || math.Abs(a.Service.Mean-im) > 1e-6 {
			t.Errorf("%s: service n %d mean %.4f; README %d %.3f; standard library %d %.4f", a.Name, a.Service.N, a.Service.Mean, w.n, w.mean, len(indep[a.Name]), im)
		}
	}
	// Each activity's service histogram holds the independent durations
	// in its bins (fewer than ExactValues distinct values: exact).
	for _, a := range s.Activities {
		h := a.Histogram
		if h == nil {
			t.Errorf("%s: no service histogram", a.Name)
			continue
		}
		want := make([]uint64, len(h.Counts))
		for _, x := range indep[a.Name] {
			for i := range want {
				if x >= h.Edges[i] && x < h.Edges[i+1] {
					want[i]++
				}
			}
		}
		if !slices.Equal(h.Counts, want) || h.Edges[0] != 0 || h.Edges[len(h.Edges)-1] <= a.Service.Max {
			t.Errorf("%s: histogram %v on %v; standard library %v", a.Name, h.Counts, h.Edges, want)
		}
	}
	if s.Cases.Value != 500 || s.Resources.Value != 7 || s.Events != 5442 {
		t.Errorf("summary cases %v resources %v events %d; README 500, 7, 5442", s.Cases.Value, s.Resources.Value, s.Events)
	}
	// Every case of this log has a start; the service columns are valid
	// exactly where a start and its complete were paired.
	for _, c := range cs {
		if c.nulls[2] != 'v' {
			t.Errorf("case %s: start_at null", c.id)
			break
		}
	}
	// Traces: each activity instance (handling_id) is one step, at its
	// start; the log has no two starts of a case at one instant. From
	// memory, the log's R package describes 7 traces for it (not asserted;
	// the independent reading is).
	byCase := map[string][]*inst{}
	for _, in := range insts {
		byCase[in.cse] = append(byCase[in.cse], in)
	}
	variants := map[string]uint64{}
	follows := map[[2]string]uint64{}
	for _, l := range byCase {
		sort.Slice(l, func(i, j int) bool { return l[i].start.Before(*l[j].start) })
		var seq []string
		for i, in := range l {
			seq = append(seq, in.act)
			if i > 0 {
				follows[[2]string{l[i-1].act, in.act}]++
			}
		}
		variants[strings.Join(seq, " > ")]++
	}
	gotV := map[string]uint64{}
	for _, v := range s.Process.Variants {
		gotV[strings.Join(v.Activities, " > ")] = v.Cases
	}
	if s.Process.DistinctVariant != uint64(len(variants)) || !maps.Equal(gotV, variants) {
		t.Errorf("variants %d %v; independent reading by activity instance %d %v", s.Process.DistinctVariant, gotV, len(variants), variants)
	}
	gotF := map[[2]string]uint64{}
	for _, f := range s.Process.DirectlyFollows {
		gotF[[2]string{f.From, f.To}] = f.Count
	}
	if !maps.Equal(gotF, follows) {
		t.Errorf("directly follows %v; independent reading %v", gotF, follows)
	}
	tableVariants := map[string]bool{}
	for _, c := range cs {
		tableVariants[c.variant] = true
	}
	if len(tableVariants) != len(variants) {
		t.Errorf("case table: %d distinct variant ids, want %d", len(tableVariants), len(variants))
	}
}

// TestCompletionOnlyLog: a log of completions alone, grouped by case (as
// many hospital exports are), spilled many times by the sort: every case
// whole, its duration the span of its steps, and waits and services named
// as not measurable.
func TestCompletionOnlyLog(t *testing.T) {
	const cases, per = 3000, 20
	data, err := io.ReadAll(synth.NewCompletions(cases, per))
	if err != nil {
		t.Fatal(err)
	}
	e := newEnv(t, func(o *Options) { o.RunEvents = 4096 })
	e.dataset(t, "p", "d", nil)
	v := e.ingest(t, "p", "d", data, "long.csv").Version
	want := int64((per - 1) * 6 * 3600 * 1e6) // a step every 6 hours (synth.NewCompletions)
	cs := readArrowCases(t, e.caseTable(t, v))
	if len(cs) != cases {
		t.Fatalf("%d case rows, want %d", len(cs), cases)
	}
	for _, c := range cs {
		if c.events != per || c.duration != want || c.nulls != "nnnnnnn" {
			t.Fatalf("case %s: %d events over %d µs, nulls %s; want %d over %d, all optional columns null", c.id, c.events, c.duration, c.nulls, per, want)
		}
	}
	js, err := e.s.Summary(context.Background(), "p/d", v.Number)
	if err != nil {
		t.Fatal(err)
	}
	var s summary.Summary
	if err := json.Unmarshal(js, &s); err != nil {
		t.Fatal(err)
	}
	if s.Cases.Value != cases || s.EventsPerCase.Min != per || s.EventsPerCase.Max != per || len(s.NotMeasurable) != 3 || s.NotMeasurable[2].Figure != "littles_law" ||
		s.BetweenEvents.N != cases*(per-1) || s.BetweenEvents.Mean != 6*3600 {
		t.Errorf("summary cases %v, events per case %+v, between %d mean %v, not measurable %+v", s.Cases.Value, s.EventsPerCase, s.BetweenEvents.N, s.BetweenEvents.Mean, s.NotMeasurable)
	}
	if q := e.report(t, v).Cases; q.Count != cases || q.MeanDurationSeconds != float64(want)/1e6 {
		t.Errorf("report cases %+v", q)
	}
}

// TestPatientsResourceOverlaps: the resource overlaps the report counts in
// the patients log (testdata/patients) equal an independent reading with
// the standard library: an employee's service runs from a start to the
// complete of the same activity instance (handling_id); a start while the
// employee already serves another counts once; at one instant completes
// come first (a service ending at t frees the employee for one starting
// at t). Every instance of this log has both its start and its complete.
func TestPatientsResourceOverlaps(t *testing.T) {
	data := patientsCSV(t)
	prof, err := os.ReadFile(filepath.Join("..", "testdata", "patients", "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	e := newEnv(t, nil)
	e.dataset(t, "p", "patients", func(s *DatasetSpec) { s.Profile = prof })
	v := e.ingest(t, "p", "patients", data, "patients.csv.gz").Version

	zr, err := gzip.NewReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(zr).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	head, recs := recs[0], recs[1:]
	col := func(name string) int { return slices.Index(head, name) }
	type ev struct {
		at           time.Time
		start        bool
		emp, handing string
	}
	var evs []ev
	for _, r := range recs {
		at, err := time.Parse(time.RFC3339, r[col("time")])
		if err != nil {
			t.Fatal(err)
		}
		evs = append(evs, ev{at, r[col("registration_type")] == "start", r[col("employee")], r[col("handling_id")]})
	}
	slices.SortStableFunc(evs, func(a, b ev) int {
		if c := a.at.Compare(b.at); c != 0 {
			return c
		}
		switch {
		case !a.start && b.start:
			return -1
		case a.start && !b.start:
			return 1
		}
		return 0
	})
	open := map[string]map[string]bool{}
	var want int64
	for _, x := range evs {
		if open[x.emp] == nil {
			open[x.emp] = map[string]bool{}
		}
		if !x.start {
			delete(open[x.emp], x.handing)
			continue
		}
		if len(open[x.emp]) > 0 {
			want++
		}
		open[x.emp][x.handing] = true
	}
	if got := e.report(t, v).Count(quality.CodeResourceOverlap); got != want {
		t.Errorf("resource overlaps %d, standard library %d", got, want)
	}
}

// TestSepsisMonthlyAppends: the sepsis log (testdata/sepsis, published
// figures in its README) cut by event month into 19 nightly appends gives
// the figures of the one-file upload: 1050 cases, the published mean case
// duration 2459733.94 s, the same case table bytes, the same case-level
// summary and quality figures. Many of its cases span months, so each
// append continues cases of earlier ones.
func TestSepsisMonthlyAppends(t *testing.T) {
	gz, err := os.ReadFile(filepath.Join("..", "testdata", "sepsis", "sepsis-cases.csv.gz"))
	if err != nil {
		t.Fatal(err)
	}
	prof, err := os.ReadFile(filepath.Join("..", "testdata", "sepsis", "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	zr, err := gzip.NewReader(bytes.NewReader(gz))
	if err != nil {
		t.Fatal(err)
	}
	raw, err := io.ReadAll(zr)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimRight(string(raw), "\r\n"), "\n")
	head := lines[0]
	byMonth := map[string][]string{}
	spanning := map[string]map[string]bool{} // case -> months
	for _, l := range lines[1:] {
		f := strings.SplitN(l, ";", 4) // Case ID;Activity;Complete Timestamp;...
		if len(f) < 4 || len(f[2]) < 7 {
			t.Fatalf("unexpected row %q", l)
		}
		m := f[2][:7] // 2014/10
		byMonth[m] = append(byMonth[m], l)
		if spanning[f[0]] == nil {
			spanning[f[0]] = map[string]bool{}
		}
		spanning[f[0]][m] = true
	}
	months := slices.Sorted(maps.Keys(byMonth))
	var multi int
	for _, ms := range spanning {
		if len(ms) > 1 {
			multi++
		}
	}
	if len(months) < 12 || multi < 100 {
		t.Fatalf("%d months, %d cases spanning months: the split would not test continuation", len(months), multi)
	}
	t.Logf("%d monthly files; %d of %d cases span two months or more", len(months), multi, len(spanning))

	e := newEnv(t, func(o *Options) { o.RunEvents = 2000 })
	e.dataset(t, "h", "one", func(s *DatasetSpec) { s.Profile = prof })
	e.dataset(t, "h", "monthly", func(s *DatasetSpec) { s.Profile = prof })
	one := e.ingest(t, "h", "one", gz, "sepsis-cases.csv.gz").Version
	var last *Version
	for _, m := range months {
		body := head + "\n" + strings.Join(byMonth[m], "\n") + "\n"
		last = e.ingest(t, "h", "monthly", []byte(body), "sepsis-"+strings.ReplaceAll(m, "/", "-")+".csv").Version
	}
	if len(last.Manifest.Files) != len(months) {
		t.Fatalf("monthly version has %d files, want %d", len(last.Manifest.Files), len(months))
	}
	if a, b := e.blobBytes(t, one.Manifest.CaseTable.SHA256), e.blobBytes(t, last.Manifest.CaseTable.SHA256); !bytes.Equal(a, b) {
		t.Error("the case tables of one file and of the monthly appends differ")
	}
	q1, qm := e.report(t, one), e.report(t, last)
	for name, q := range map[string]*quality.Report{"one file": q1, "monthly": qm} {
		// README: 1050 cases, mean case duration 2459733.94 s.
		if q.Cases.Count != 1050 || math.Abs(q.Cases.MeanDurationSeconds-2459733.94) > 0.005 {
			t.Errorf("%s: report cases %+v; published 1050, mean 2459733.94 s", name, q.Cases)
		}
	}
	if q1.Cases != qm.Cases || q1.Stages != qm.Stages || q1.Count(quality.CodeCaseTooLong) != qm.Count(quality.CodeCaseTooLong) ||
		q1.Count(quality.CodeSameInstant) != qm.Count(quality.CodeSameInstant) || q1.Count(quality.CodeDuplicateCaseTypeTime) != qm.Count(quality.CodeDuplicateCaseTypeTime) {
		t.Errorf("case-level quality differs:\none %+v %+v\nmonthly %+v %+v", q1.Cases, q1.Stages, qm.Cases, qm.Stages)
	}
	ctx := context.Background()
	var s [2]summary.Summary
	for i, v := range []struct {
		ref string
		n   int
	}{{"h/one", one.Number}, {"h/monthly", last.Number}} {
		js, err := e.s.Summary(ctx, v.ref, v.n)
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(js, &s[i]); err != nil {
			t.Fatal(err)
		}
	}
	if s[1].Cases.Value != 1050 || !s[1].Cases.Exact || s[1].LengthOfStay.N != 1050 || math.Abs(s[1].LengthOfStay.Mean-2459733.94) > 0.005 {
		t.Errorf("monthly summary: cases %+v, stays n %d mean %.4f; published 1050, 2459733.94 s", s[1].Cases, s[1].LengthOfStay.N, s[1].LengthOfStay.Mean)
	}
	for _, m := range []struct {
		name string
		a, b any
	}{
		{"cases", s[0].Cases, s[1].Cases}, {"length_of_stay", s[0].LengthOfStay, s[1].LengthOfStay},
		{"events_per_case", s[0].EventsPerCase, s[1].EventsPerCase}, {"between_events", s[0].BetweenEvents, s[1].BetweenEvents},
		{"process", s[0].Process, s[1].Process}, {"resources", s[0].Resources, s[1].Resources},
		{"arrivals", s[0].Arrivals, s[1].Arrivals}, {"exposure_hours", s[0].ExposureHours, s[1].ExposureHours},
	} {
		a, _ := json.Marshal(m.a)
		b, _ := json.Marshal(m.b)
		if !bytes.Equal(a, b) {
			t.Errorf("summary %s differs: one file %.300s, monthly %.300s", m.name, a, b)
		}
	}
}

// TestSepsisMaxCaseDays: case_too_long counts the cases longer than the
// profile's max_case_days (default 30), equal to a standard-library count
// over the sepsis log's raw rows (wall clock in Europe/Amsterdam, as its
// README says).
func TestSepsisMaxCaseDays(t *testing.T) {
	gz, err := os.ReadFile(filepath.Join("..", "testdata", "sepsis", "sepsis-cases.csv.gz"))
	if err != nil {
		t.Fatal(err)
	}
	prof, err := os.ReadFile(filepath.Join("..", "testdata", "sepsis", "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	zr, err := gzip.NewReader(bytes.NewReader(gz))
	if err != nil {
		t.Fatal(err)
	}
	raw, err := io.ReadAll(zr)
	if err != nil {
		t.Fatal(err)
	}
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	lo, hi := map[string]time.Time{}, map[string]time.Time{}
	for _, l := range strings.Split(strings.TrimRight(string(raw), "\r\n"), "\n")[1:] {
		f := strings.SplitN(l, ";", 4)
		at, err := time.ParseInLocation("2006/01/02 15:04:05.000", f[2], ams)
		if err != nil {
			t.Fatal(err)
		}
		if x, ok := lo[f[0]]; !ok || at.Before(x) {
			lo[f[0]] = at
		}
		if x, ok := hi[f[0]]; !ok || at.After(x) {
			hi[f[0]] = at
		}
	}
	longer := func(days int) (n int64) {
		for c := range lo {
			if hi[c].Sub(lo[c]) > time.Duration(days)*24*time.Hour {
				n++
			}
		}
		return n
	}
	e := newEnv(t, nil)
	for _, c := range []struct {
		name string
		days int // 0: the default, 30
		line string
	}{{"default", 30, ""}, {"year", 365, "max_case_days: 365\n"}, {"week", 7, "max_case_days: 7\n"}} {
		e.dataset(t, "h", c.name, func(s *DatasetSpec) { s.Profile = append([]byte(c.line), prof...) })
		v := e.ingest(t, "h", c.name, gz, "sepsis-cases.csv.gz").Version
		q := e.report(t, v)
		want := longer(c.days)
		if got := q.Count(quality.CodeCaseTooLong); got != want || want == 0 || want == 1050 {
			t.Errorf("%s: case_too_long %d, standard library %d cases longer than %d days", c.name, got, want, c.days)
		}
		if q.Raw.Settings.MaxCaseSeconds != float64(c.days*86400) {
			t.Errorf("%s: report settings max_case_seconds %v, want %d", c.name, q.Raw.Settings.MaxCaseSeconds, c.days*86400)
		}
		t.Logf("max %d days: %d of 1050 cases longer", c.days, want)
	}
}
