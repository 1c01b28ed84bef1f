package quality

import (
	"bytes"
	"encoding/json"
	"flag"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

var update = flag.Bool("update", false, "rewrite testdata/report.golden.json")

func TestFieldPositions(t *testing.T) {
	want := map[int]schema.Field{
		fSite: schema.FieldSite, fCaseID: schema.FieldCaseID, fSubjectID: schema.FieldSubjectID,
		fResourceID: schema.FieldResourceID, fEventType: schema.FieldEventType, fActivity: schema.FieldActivity,
		fQueue: schema.FieldQueue, fOccurredAt: schema.FieldOccurredAt, fPriority: schema.FieldPriority,
		fChannel: schema.FieldChannel, fOutcome: schema.FieldOutcome, fEventID: schema.FieldEventID,
	}
	if len(schema.Fields) != numFields {
		t.Fatalf("schema has %d fields, quality counts %d", len(schema.Fields), numFields)
	}
	for i, f := range want {
		if schema.Fields[i] != f {
			t.Errorf("position %d: schema has %s, quality assumes %s", i, schema.Fields[i], f)
		}
	}
}

func nonEmpty(r *Report) map[schema.Field]int64 {
	m := map[schema.Field]int64{}
	for _, c := range r.Completeness {
		m[c.Field] = c.NonEmpty
	}
	return m
}

// TestPlantedDefects checks exact counts and scores of handPlant, worked
// out by hand from the generator's rules (see fixture_test.go).
func TestPlantedDefects(t *testing.T) {
	r := handPlant.run(fixtureOptions()).Report()

	// Accepted: 20 normal cases x 5 + 3 duplicates + 4x3 + 2x3 + the two
	// traps (3 + 8) + 3 early + 2 future = 137; rejected 3+1+2+7+2 = 15.
	if want := (Rows{Total: 152, Accepted: 137, Rejected: 15}); r.Rows != want {
		t.Errorf("rows = %+v, want %+v", r.Rows, want)
	}
	if got, want := r.RejectedShare(), 15.0/152; got != want {
		t.Errorf("RejectedShare = %v, want %v", got, want)
	}
	wantRej := map[schema.Reason]int64{"ambiguous_local": 2, "bad_timestamp": 3, "field_count": 2, "missing_required": 7, "nonexistent_local": 1}
	var order []schema.Reason
	for _, rc := range r.Rejections {
		order = append(order, rc.Reason)
		if rc.Count != wantRej[rc.Reason] {
			t.Errorf("rejections[%s] = %d, want %d", rc.Reason, rc.Count, wantRej[rc.Reason])
		}
		if want := min(rc.Count, DefaultMaxSamples); int64(len(rc.Samples)) != want {
			t.Errorf("rejections[%s] has %d samples, want %d", rc.Reason, len(rc.Samples), want)
		}
	}
	if want := []schema.Reason{"ambiguous_local", "bad_timestamp", "field_count", "missing_required", "nonexistent_local"}; !reflect.DeepEqual(order, want) {
		t.Errorf("rejection order %v, want %v", order, want)
	}

	// Arrivals 20+4+2+1+1+3+2 = 33, starts = completes = 20+4+2+1+2 = 29,
	// departures 20.
	wantFields := map[schema.Field]int64{
		"site": 137, "case_id": 137, "subject_id": 137, "resource_id": 58, "event_type": 137,
		"activity": 137, "queue": 117, "occurred_at": 137, "priority": 33, "channel": 0,
		"outcome": 29, "event_id": 137,
	}
	if got := nonEmpty(r); !reflect.DeepEqual(got, wantFields) {
		t.Errorf("non-empty counts = %v, want %v", got, wantFields)
	}
	for _, c := range r.Completeness {
		if want := !c.Field.Required() && c.Field != schema.FieldChannel; c.Scored != want {
			t.Errorf("%s scored = %v, want %v", c.Field, c.Scored, want)
		}
		if want := float64(wantFields[c.Field]) / 137; c.Share != want {
			t.Errorf("%s share = %v, want %v", c.Field, c.Share, want)
		}
	}

	wantTS := Timestamps{
		Unparseable:         Unparseable{Total: 6, BadTimestamp: 3, NonexistentLocal: 1, AmbiguousLocal: 2},
		LaterThanUpload:     2,
		OutsideWindow:       5, // 3 early + the 2 future
		StartBeforeArrival:  4,
		CompleteBeforeStart: 2,
		RowsAffected:        17, // 6 unparseable + 4 + 2 + 5 (future rows counted once)
	}
	got := r.Timestamps
	got.UploadedAt, got.WindowFrom, got.WindowTo = nil, nil, nil
	if got != wantTS {
		t.Errorf("timestamps = %+v, want %+v", got, wantTS)
	}
	if r.Uniqueness.ExactDuplicates != 3 {
		t.Errorf("duplicates = %d, want 3", r.Uniqueness.ExactDuplicates)
	}
	if !r.TimeRange.First.Equal(windowFrom.Add(-3*time.Hour)) || !r.TimeRange.Last.Equal(uploadedAt.Add(2*time.Hour)) {
		t.Errorf("time range = %v .. %v", r.TimeRange.First, r.TimeRange.Last)
	}
	// north: even-numbered cases; 20 normal: 10 each side with 2 of the 3
	// duplicates at north (n000, n002) ... counted by hand:
	// north = 10*5+2 + 2*3 + 1*3 + 3(eq) + 2 early + 1 future = 67,
	// south = 10*5+1 + 2*3 + 1*3 + 8(re) + 1 early + 1 future = 70.
	wantSites := Sites{Distinct: 2, Counts: []SiteCount{{"south", 70}, {"north", 67}}}
	if !reflect.DeepEqual(r.Sites, wantSites) {
		t.Errorf("sites = %+v, want %+v", r.Sites, wantSites)
	}

	// Scores by the formulas of SCORING.md.
	validity := 100 * 137.0 / 152                                              // 90.13
	completeness := 100 * (137 + 58 + 137 + 117 + 33 + 29 + 137) / (7 * 137.0) // 7 used optional fields: 67.57
	timestamps := 100 * (1 - 17.0/152)                                         // 88.82
	uniqueness := 100 * (1 - 3.0/137)                                          // 97.81
	overall := 0.35*validity + 0.20*completeness + 0.30*timestamps + 0.15*uniqueness
	wantScores := map[string]float64{"validity": 90.1, "completeness": 67.6, "timestamps": 88.8, "uniqueness": 97.8}
	for name, s := range map[string]float64{"validity": validity, "completeness": completeness, "timestamps": timestamps, "uniqueness": uniqueness} {
		d := r.Dimension(name)
		if d == nil || d.Score == nil {
			t.Fatalf("dimension %s missing or unscored", name)
		}
		if *d.Score != wantScores[name] || *d.Score != math.Round(s*10)/10 {
			t.Errorf("%s score = %v, want %v (%v)", name, *d.Score, wantScores[name], s)
		}
	}
	if r.Score == nil || *r.Score != 86.4 || *r.Score != math.Round(overall*10)/10 {
		t.Errorf("score = %v, want 86.4 (%v)", r.Score, overall)
	}

	wantFindings := map[string]int64{
		"validity/ambiguous_local": 2, "validity/bad_timestamp": 3, "validity/field_count": 2,
		"validity/missing_required": 7, "validity/nonexistent_local": 1,
		"completeness/empty_value/resource_id": 79, "completeness/empty_value/queue": 20,
		"completeness/empty_value/priority": 104, "completeness/empty_value/outcome": 108,
		"timestamps/bad_timestamp": 3, "timestamps/nonexistent_local": 1, "timestamps/ambiguous_local": 2,
		"timestamps/later_than_upload": 2, "timestamps/outside_window": 5,
		"timestamps/start_before_arrival": 4, "timestamps/complete_before_start": 2,
		"uniqueness/exact_duplicate": 3,
	}
	gotFindings := map[string]int64{}
	for d, f := range r.Findings() {
		k := d.Name + "/" + f.Code
		if f.Field != "" {
			k += "/" + string(f.Field)
		}
		gotFindings[k] = f.Count
		if f.Why == "" || strings.Count(f.Why, ". ") > 0 {
			t.Errorf("%s: why should be one sentence: %q", k, f.Why)
		}
		if want := float64(f.Count) / float64(d.Rows); f.Share != want {
			t.Errorf("%s share = %v, want %v", k, f.Share, want)
		}
	}
	if !reflect.DeepEqual(gotFindings, wantFindings) {
		t.Errorf("findings = %v\nwant %v", gotFindings, wantFindings)
	}
	if len(r.Internal) != 0 {
		t.Errorf("internal findings on a sorted stream: %+v", r.Internal)
	}
}

// TestPlantedCounts checks the count findings against the generator's
// formulas over several plantings, including none.
func TestPlantedCounts(t *testing.T) {
	for _, p := range []plant{
		{normal: 5},
		{normal: 1, dups: 1},
		{normal: 50, dups: 17, startBeforeArrival: 9, completeBeforeStart: 11, future: 4, early: 6,
			rejections: map[schema.Reason]int{schema.ReasonUnknownCode: 12, schema.ReasonBadTimestamp: 1}},
		{normal: 3000, dups: 1000, startBeforeArrival: 300, completeBeforeStart: 200, future: 10, early: 10},
	} {
		r := p.run(fixtureOptions()).Report()
		accepted := int64(5*p.normal + p.dups + 3*p.startBeforeArrival + 3*p.completeBeforeStart + trapEvents + p.early + p.future)
		var rejected int64
		for _, n := range p.rejections {
			rejected += int64(n)
		}
		bad := int64(p.rejections[schema.ReasonBadTimestamp])
		if r.Rows.Accepted != accepted || r.Rows.Rejected != rejected {
			t.Errorf("%+v: rows %+v, want %d accepted, %d rejected", p, r.Rows, accepted, rejected)
		}
		ts := r.Timestamps
		if ts.StartBeforeArrival != int64(p.startBeforeArrival) || ts.CompleteBeforeStart != int64(p.completeBeforeStart) ||
			ts.LaterThanUpload != int64(p.future) || ts.OutsideWindow != int64(p.future+p.early) ||
			ts.RowsAffected != bad+int64(p.startBeforeArrival+p.completeBeforeStart+p.future+p.early) {
			t.Errorf("%+v: timestamps %+v", p, ts)
		}
		if r.Uniqueness.ExactDuplicates != int64(p.dups) {
			t.Errorf("%+v: duplicates %d", p, r.Uniqueness.ExactDuplicates)
		}
		wantU := 100 * (1 - float64(p.dups)/float64(accepted))
		if s := r.Dimension(DimUniqueness).Score; *s != math.Round(wantU*10)/10 {
			t.Errorf("%+v: uniqueness %v, want %v", p, *s, wantU)
		}
	}
}

// TestCaseOrder checks the per-case rules on short streams of one or two
// cases; minutes are offsets from t0.
func TestCaseOrder(t *testing.T) {
	type ev struct {
		c string
		t schema.EventType
		m int
	}
	A, E, S, C, T := schema.Arrival, schema.Enqueue, schema.Start, schema.Complete, schema.Transfer
	for _, tc := range []struct {
		name     string
		evs      []ev
		sba, cbs int64
	}{
		{"in order", []ev{{"a", A, 0}, {"a", E, 1}, {"a", S, 2}, {"a", C, 3}}, 0, 0},
		{"start before arrival", []ev{{"a", S, 0}, {"a", A, 1}}, 1, 0},
		{"start before enqueue", []ev{{"a", S, 0}, {"a", E, 1}}, 1, 0},
		{"equal instant start first", []ev{{"a", S, 0}, {"a", A, 0}}, 0, 0},
		{"two starts one arrival", []ev{{"a", S, 0}, {"a", S, 1}, {"a", A, 2}, {"a", E, 3}}, 1, 0},
		{"requeue after transfer", []ev{{"a", A, 0}, {"a", S, 1}, {"a", C, 2}, {"a", T, 3}, {"a", E, 4}, {"a", S, 5}}, 0, 0},
		{"complete before start", []ev{{"a", A, 0}, {"a", C, 1}, {"a", S, 2}}, 0, 1},
		{"complete and start equal", []ev{{"a", A, 0}, {"a", C, 1}, {"a", S, 1}}, 0, 0},
		{"both", []ev{{"a", C, 0}, {"a", S, 1}, {"a", A, 2}}, 1, 1},
		{"other case", []ev{{"a", S, 0}, {"b", A, 1}}, 0, 0},
		{"start without arrival", []ev{{"a", S, 0}, {"a", C, 1}}, 0, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			a := NewAccumulator(Options{})
			for i, x := range tc.evs {
				e := event(x.c, 0, x.t, t0.Add(time.Duration(x.m)*time.Minute))
				e.Line = int64(i + 2)
				a.Observe(&e)
			}
			r := a.Report()
			if r.Timestamps.StartBeforeArrival != tc.sba || r.Timestamps.CompleteBeforeStart != tc.cbs {
				t.Errorf("got %d start_before_arrival, %d complete_before_start; want %d, %d",
					r.Timestamps.StartBeforeArrival, r.Timestamps.CompleteBeforeStart, tc.sba, tc.cbs)
			}
		})
	}
}

func TestDuplicates(t *testing.T) {
	base := event("c1", 0, schema.Arrival, t0)
	base.Channel, base.Outcome = "phone", "x"
	// Each variant differs from base in one field only: never a duplicate.
	variants := []func(e *schema.Event){
		func(e *schema.Event) { e.Site = "south" },
		func(e *schema.Event) { e.CaseID = "c2" },
		func(e *schema.Event) { e.SubjectID = "other" },
		func(e *schema.Event) { e.ResourceID = "r9" },
		func(e *schema.Event) { e.Type = schema.Enqueue },
		func(e *schema.Event) { e.Activity = "other" },
		func(e *schema.Event) { e.Queue = "q9" },
		func(e *schema.Event) { e.Priority = "p9" },
		func(e *schema.Event) { e.Channel = "web" },
		func(e *schema.Event) { e.Outcome = "y" },
		func(e *schema.Event) { e.EventID = "other" },
		func(e *schema.Event) { e.OccurredAt = e.OccurredAt.Add(time.Microsecond) },
	}
	for _, crowd := range []int{0, 40, 3 * bigIndex} { // linear, hashed, and dropped index
		a := NewAccumulator(Options{})
		feed := func(e schema.Event) { a.Observe(&e) }
		for i := range crowd { // distinct events sharing the instant
			feed(event("crowd"+string(rune('a'+i%26))+string(rune('a'+i/26%26))+string(rune('a'+i/676)), 0, schema.Arrival, t0))
		}
		feed(base)
		for _, v := range variants[:len(variants)-1] {
			e := base
			v(&e)
			feed(e)
		}
		feed(base) // 1
		e := base
		e.Line = 99
		feed(e) // 2: the line is not a field
		e.OccurredAt = e.OccurredAt.Add(300 * time.Nanosecond)
		feed(e) // 3: same microsecond
		e = base
		variants[len(variants)-1](&e)
		feed(e) // a later instant: not a duplicate
		feed(base)
		feed(e) // 4: the set restarts when time advances
		r := a.Report()
		if r.Uniqueness.ExactDuplicates != 4 {
			t.Errorf("crowd %d: %d duplicates, want 4", crowd, r.Uniqueness.ExactDuplicates)
		}
		if len(r.Internal) != 1 || r.Internal[0].Count != 1 {
			t.Errorf("crowd %d: want one order breach (base after a later event), got %+v", crowd, r.Internal)
		}
	}
}

func TestEmptyReport(t *testing.T) {
	r := NewAccumulator(Options{}).Report()
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	if m["score"] != nil {
		t.Errorf("score = %v, want null: nothing was measured", m["score"])
	}
	for _, k := range []string{"rejections", "completeness", "dimensions", "internal"} {
		if _, ok := m[k].([]any); !ok {
			t.Errorf("%s = %v, want a list", k, m[k])
		}
	}
	if tr := m["time_range"].(map[string]any); tr["first"] != nil || tr["last"] != nil {
		t.Errorf("time_range = %v, want nulls", tr)
	}
	if r.RejectedShare() != 0 {
		t.Errorf("RejectedShare = %v", r.RejectedShare())
	}
	for _, d := range r.Dimensions {
		if d.Score != nil || d.Findings == nil {
			t.Errorf("dimension %s: score %v, findings %v", d.Name, d.Score, d.Findings)
		}
	}
	for _, c := range r.Completeness {
		if c.Share != 0 || c.Scored {
			t.Errorf("%+v", c)
		}
	}
	var buf bytes.Buffer
	if err := r.Text(&buf, true); err != nil {
		t.Fatal(err)
	}
}

func TestOnlyRejections(t *testing.T) {
	a := NewAccumulator(Options{})
	a.Reject(schema.Rejection{Line: 2, Reason: schema.ReasonMalformedRow})
	r := a.Report()
	if s := r.Dimension(DimValidity).Score; s == nil || *s != 0 {
		t.Errorf("validity = %v, want 0", s)
	}
	if r.Dimension(DimCompleteness).Score != nil || r.Dimension(DimUniqueness).Score != nil {
		t.Error("completeness and uniqueness have no accepted rows to score")
	}
	// Weights renormalize over validity (0) and timestamps (100).
	if want := math.Round(10*(0.35*0+0.30*100)/0.65) / 10; r.Score == nil || *r.Score != want {
		t.Errorf("score = %v, want %v", r.Score, want)
	}
	if _, err := json.Marshal(r); err != nil {
		t.Fatal(err)
	}
}

func TestMappedFields(t *testing.T) {
	opt := fixtureOptions()
	opt.MappedFields = []schema.Field{schema.FieldSite, schema.FieldCaseID, schema.FieldSubjectID, schema.FieldResourceID,
		schema.FieldEventType, schema.FieldActivity, schema.FieldQueue, schema.FieldOccurredAt, schema.FieldPriority,
		schema.FieldChannel, schema.FieldOutcome, schema.FieldEventID}
	r := handPlant.run(opt).Report()
	// channel is mapped but never filled: it now counts, as share 0.
	want := math.Round(10*100*(137+58+137+117+33+0+29+137)/(8*137.0)) / 10
	if s := r.Dimension(DimCompleteness).Score; *s != want {
		t.Errorf("completeness = %v, want %v", *s, want)
	}
	opt.MappedFields = []schema.Field{schema.FieldSite, schema.FieldPriority}
	r = handPlant.run(opt).Report()
	if s := r.Dimension(DimCompleteness).Score; *s != math.Round(1000*33/137.0)/10 {
		t.Errorf("completeness over priority alone = %v", *s)
	}
}

// stripSamples clears the samples, which depend on which file saw a row
// first.
func stripSamples(r *Report) {
	for i := range r.Rejections {
		r.Rejections[i].Samples = nil
	}
	for i := range r.Dimensions {
		for j := range r.Dimensions[i].Findings {
			r.Dimensions[i].Findings[j].Samples = nil
		}
	}
	for i := range r.Internal {
		r.Internal[i].Samples = nil
	}
}

// TestMergeHalves splits the fixture by case into two time-sorted files;
// since every per-case and duplicate finding lies within one case, the
// merged counts equal those of the whole.
func TestMergeHalves(t *testing.T) {
	whole := handPlant.run(fixtureOptions()).Report()
	a, b := NewAccumulator(fixtureOptions()), NewAccumulator(fixtureOptions())
	for _, e := range handPlant.events() {
		if e.CaseID[len(e.CaseID)-1]%2 == 0 {
			a.Observe(&e)
		} else {
			b.Observe(&e)
		}
	}
	for i, r := range handPlant.rejected() {
		if i%2 == 0 {
			a.Reject(r)
		} else {
			b.Reject(r)
		}
	}
	if a.Report().Rows.Accepted == 0 || b.Report().Rows.Accepted == 0 {
		t.Fatal("split left a half empty")
	}
	a.Merge(b)
	merged := a.Report()
	stripSamples(whole)
	stripSamples(merged)
	if !reflect.DeepEqual(whole, merged) {
		wj, _ := json.MarshalIndent(whole, "", " ")
		mj, _ := json.MarshalIndent(merged, "", " ")
		t.Errorf("merged report differs from whole:\n%s\nvs\n%s", mj, wj)
	}
}

func TestMergeSamplesCapped(t *testing.T) {
	opt := fixtureOptions()
	opt.MaxSamples = 3
	a, b := handPlant.run(opt), handPlant.run(opt)
	a.Merge(b)
	r := a.Report()
	if r.Rows.Total != 304 || r.Uniqueness.ExactDuplicates != 6 {
		t.Errorf("rows %+v, duplicates %d", r.Rows, r.Uniqueness.ExactDuplicates)
	}
	for d, f := range r.Findings() {
		if len(f.Samples) > 3 {
			t.Errorf("%s/%s: %d samples", d.Name, f.Code, len(f.Samples))
		}
	}
}

func TestMaxSamples(t *testing.T) {
	for _, max := range []int{1, 2, 5} {
		opt := fixtureOptions()
		opt.MaxSamples = max
		r := handPlant.run(opt).Report()
		check := func(what string, n int64, s []Sample) {
			if len(s) > max || int64(len(s)) != min(n, int64(max)) {
				t.Errorf("max %d: %s has %d samples for %d rows", max, what, len(s), n)
			}
		}
		for _, rc := range r.Rejections {
			check(string(rc.Reason), rc.Count, rc.Samples)
		}
		for d, f := range r.Findings() {
			check(d.Name+"/"+f.Code, f.Count, f.Samples)
			for _, s := range f.Samples {
				if s.Line < 2 {
					t.Errorf("%s/%s: sample without a line", d.Name, f.Code)
				}
			}
		}
		if r.Rejections[3].Count != 7 {
			t.Errorf("missing_required count %d", r.Rejections[3].Count)
		}
	}
}

// TestPruning checks that cases idle beyond the horizon are dropped, which
// bounds memory, and what that costs: an arrival after the horizon no
// longer meets its case's start.
func TestPruning(t *testing.T) {
	a := NewAccumulator(Options{CaseHorizon: 30 * time.Minute})
	a.pruneEvery = 1
	peak := 0
	for i := range 1000 {
		e := event(caseName(i), 0, schema.Start, t0.Add(time.Duration(i)*time.Minute))
		a.Observe(&e)
		peak = max(peak, a.openCases())
	}
	// A sweep runs once as many events as open cases have passed, so at
	// most twice the 31 cases within the horizon are held.
	if peak > 2*31+1 {
		t.Errorf("peak %d open cases, want at most 63", peak)
	}
	a.prune(uint64(999 * time.Minute / time.Microsecond))
	if got := a.openCases(); got != 31 { // minutes 969..999
		t.Errorf("after a sweep %d open cases, want 31", got)
	}

	for _, tc := range []struct {
		horizon time.Duration
		want    int64
	}{{30 * time.Minute, 0}, {DefaultCaseHorizon, 1}} {
		a := NewAccumulator(Options{CaseHorizon: tc.horizon})
		a.pruneEvery = 1
		e := event("late", 0, schema.Start, t0)
		a.Observe(&e)
		for i := range 200 {
			e := event(caseName(i), 0, schema.Arrival, t0.Add(time.Duration(i+1)*time.Minute))
			a.Observe(&e)
		}
		e = event("late", 0, schema.Arrival, t0.Add(5*time.Hour))
		a.Observe(&e)
		if got := a.Report().Timestamps.StartBeforeArrival; got != tc.want {
			t.Errorf("horizon %v: %d start_before_arrival, want %d", tc.horizon, got, tc.want)
		}
	}
}

// TestHorizonWithoutSweep: a case idle past the horizon is a new case
// whether or not a sweep ran in between, so the count is the same for a
// small file and a large one.
func TestHorizonWithoutSweep(t *testing.T) {
	for _, fillers := range []int{10, 70_000} {
		a := NewAccumulator(Options{}) // 30-day horizon, default sweep interval
		e := event("x", 0, schema.Start, t0)
		a.Observe(&e)
		for i := range fillers {
			f := event("f", 0, schema.Arrival, t0.Add(time.Duration(i+1)*time.Second))
			a.Observe(&f)
		}
		e = event("x", 0, schema.Arrival, t0.Add(40*24*time.Hour))
		a.Observe(&e)
		if got := a.Report().Timestamps.StartBeforeArrival; got != 0 {
			t.Errorf("%d fillers: %d start_before_arrival, want 0 (idle 40 days > 30-day horizon)", fillers, got)
		}
	}
}

func caseName(i int) string {
	return "p" + string(rune('a'+i%26)) + string(rune('a'+i/26%26)) + string(rune('a'+i/676))
}

func TestOrderBreach(t *testing.T) {
	a := NewAccumulator(Options{})
	for i, m := range []int{0, 5, 3, 7, 7, 1} {
		e := event(caseName(i), 0, schema.Arrival, t0.Add(time.Duration(m)*time.Minute))
		e.Line = int64(i + 2)
		a.Observe(&e)
	}
	r := a.Report()
	if r.Rows.Accepted != 6 || len(r.Internal) != 1 || r.Internal[0].Code != CodeOrderBreach || r.Internal[0].Count != 2 {
		t.Fatalf("rows %+v internal %+v", r.Rows, r.Internal)
	}
	if got := []int64{r.Internal[0].Samples[0].Line, r.Internal[0].Samples[1].Line}; !reflect.DeepEqual(got, []int64{4, 7}) {
		t.Errorf("breach lines %v, want [4 7]", got)
	}
	if !r.TimeRange.First.Equal(t0) || !r.TimeRange.Last.Equal(t0.Add(7*time.Minute)) {
		t.Errorf("time range %v .. %v", r.TimeRange.First, r.TimeRange.Last)
	}
	for _, d := range r.Dimensions {
		if *d.Score != 100 {
			t.Errorf("%s = %v: internal faults must not lower scores", d.Name, *d.Score)
		}
	}
}

func TestSitesCap(t *testing.T) {
	a := NewAccumulator(Options{})
	for i := range maxSites + 10 {
		e := event("c", 0, schema.Transfer, t0)
		e.Site = caseName(i)
		a.Observe(&e)
		a.Observe(&e)
	}
	r := a.Report()
	if r.Sites.Distinct != maxSites || r.Sites.Other != 20 || len(r.Sites.Counts) != maxSites {
		t.Errorf("distinct %d other %d counts %d", r.Sites.Distinct, r.Sites.Other, len(r.Sites.Counts))
	}
}

func TestText(t *testing.T) {
	r := handPlant.run(fixtureOptions()).Report()
	var plain, color bytes.Buffer
	if err := r.Text(&plain, false); err != nil {
		t.Fatal(err)
	}
	if err := r.Text(&color, true); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(plain.String(), "\x1b") {
		t.Error("escape codes without colour")
	}
	if !strings.Contains(color.String(), ansiGreen+"  90.1"+ansiReset) {
		t.Errorf("no coloured validity score in:\n%s", color.String())
	}
	for _, want := range []string{
		"score 86.4",
		"rows   152 total, 137 accepted, 15 rejected (9.9%)",
		"validity        90.1   0.35      152",
		"uniqueness      97.8   0.15      137",
		"timestamps   start_before_arrival",
		"(not scored, never filled: channel)",
	} {
		if !strings.Contains(plain.String(), want) {
			t.Errorf("text lacks %q:\n%s", want, plain.String())
		}
	}
	if n := strings.Count(plain.String(), "\n"); n > 40 {
		t.Errorf("text is %d lines; keep it compact", n)
	}
}

func TestGolden(t *testing.T) {
	r := handPlant.run(fixtureOptions()).Report()
	got, err := json.MarshalIndent(r, "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	got = append(got, '\n')
	path := filepath.Join("testdata", "report.golden.json")
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("report differs from %s (run go test -update if intended):\n%s", path, got)
	}
	// Round trip: decoding and encoding again yields the same bytes.
	var back Report
	if err := json.Unmarshal(want, &back); err != nil {
		t.Fatal(err)
	}
	again, err := json.MarshalIndent(&back, "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(append(again, '\n'), want) {
		t.Errorf("round trip changed the JSON:\n%s", again)
	}
}

// The report must not hold identifier values other than case pseudonyms
// in samples; here the fixture's subject and resource values must not
// appear anywhere.
func TestNoValuesInReport(t *testing.T) {
	b, _ := json.Marshal(handPlant.run(fixtureOptions()).Report())
	for _, v := range []string{`"sn0`, `"r1"`, `"x"`, "triage"} {
		if bytes.Contains(b, []byte(v)) {
			t.Errorf("report holds value %s", v)
		}
	}
}
