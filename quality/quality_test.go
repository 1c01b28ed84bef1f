package quality

import (
	"bytes"
	"encoding/json"
	"fmt"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

func TestFieldPositions(t *testing.T) {
	if len(schema.Fields) != numFields || len(schema.EventTypes) != numTypes {
		t.Fatalf("schema has %d fields and %d types, quality counts %d and %d", len(schema.Fields), len(schema.EventTypes), numFields, numTypes)
	}
	want := map[int]schema.Field{fSite: schema.FieldSite, fCaseID: schema.FieldCaseID, fSubjectID: schema.FieldSubjectID,
		fResourceID: schema.FieldResourceID, fEventType: schema.FieldEventType, fActivity: schema.FieldActivity,
		fQueue: schema.FieldQueue, fOccurredAt: schema.FieldOccurredAt, fPriority: schema.FieldPriority,
		fChannel: schema.FieldChannel, fOutcome: schema.FieldOutcome, fEventID: schema.FieldEventID}
	for i, f := range want {
		if schema.Fields[i] != f {
			t.Errorf("position %d: schema has %s, quality assumes %s", i, schema.Fields[i], f)
		}
	}
	for i, ty := range schema.EventTypes {
		if typeIndex(ty) != i {
			t.Errorf("type %s at %d, quality assumes %d", ty, i, typeIndex(ty))
		}
	}
}

// run feeds evs (sorted) in file order = fileOrder (nil: sorted) and in
// time order, then rejections.
func run(opt Options, evs, fileOrder []schema.Event, rej []schema.Rejection) *Report {
	a := NewAccumulator(opt)
	for _, r := range rej {
		a.Reject(r)
	}
	if fileOrder == nil {
		fileOrder = evs
	}
	for i := range fileOrder {
		a.ObserveFileOrder(&fileOrder[i])
	}
	a.ObserveSorted(evs)
	return a.Report()
}

// counted lists every finding code the report counts (summed over fields
// and grids) but empty_value, stage and heaping findings.
func counted(r *Report) map[string]int64 {
	got := map[string]int64{}
	for _, f := range r.Findings() {
		switch {
		case f.Code == CodeEmptyValue, strings.HasPrefix(f.Code, "stage_"), f.Code == CodeHeaping:
			continue
		}
		got[f.Code] += f.Count
	}
	return got
}

// TestPlantedDefects plants every defect kind a known number of times and
// checks each count exactly, plus the stage coverage and completeness
// counted independently from the events.
func TestPlantedDefects(t *testing.T) {
	const n, future, early = 3, 2, 4
	evs := stream(n, future, early)
	// File order: the latest north row moved to the front, one step back.
	fileOrder := slices.Clone(evs)
	li := -1
	for i := range fileOrder {
		if fileOrder[i].Site == "north" && fileOrder[i].OccurredAt.Before(uploadedAt) {
			li = i
		}
	}
	moved := fileOrder[li]
	fileOrder = append([]schema.Event{moved}, slices.Delete(fileOrder, li, li+1)...)
	rej := []schema.Rejection{
		{Line: 9001, Column: "when", Field: schema.FieldOccurredAt, Reason: schema.ReasonBadTimestamp},
		{Line: 9002, Column: "when", Field: schema.FieldOccurredAt, Reason: schema.ReasonBadTimestamp},
		{Line: 9003, Column: "when", Field: schema.FieldOccurredAt, Reason: schema.ReasonNonexistentLocal},
		{Line: 9004, Column: "when", Field: schema.FieldOccurredAt, Reason: schema.ReasonAmbiguousLocal},
		{Line: 9005, Column: "case", Field: schema.FieldCaseID, Reason: schema.ReasonMissingRequired},
	}
	r := run(fixtureOptions(), evs, fileOrder, rej)

	want := expected(n, future, early)
	want[CodeClockBackwards] = 1
	want[CodeStaleSite] = 2 // south and east end in March; north has the future arrivals
	// North's first weekend (2-3 March) is busy, so its later weekend days
	// in the same run without events are gaps: 9, 10, 16, 17, 23, 24, 30
	// and 31 March. The 2025 arrivals are a run of their own and do not
	// dilute what a weekday is expected to hold.
	want[CodeGapDay] = 8
	for _, rc := range rej {
		want[string(rc.Reason)]++
	}
	if got := counted(r); !reflect.DeepEqual(got, want) {
		t.Errorf("finding counts:\n got %v\nwant %v", got, want)
	}
	if r.Rows != (Rows{Total: int64(len(evs) + len(rej)), Accepted: int64(len(evs)), Rejected: int64(len(rej))}) {
		t.Errorf("rows %+v", r.Rows)
	}

	// Stage coverage and field completeness, counted from the events.
	types := map[string]map[schema.EventType]bool{}
	nonEmpty := map[schema.Field]int64{}
	for _, e := range evs {
		if types[e.CaseID] == nil {
			types[e.CaseID] = map[schema.EventType]bool{}
		}
		types[e.CaseID][e.Type] = true
		for _, f := range schema.Fields {
			if e.Value(f) != "" {
				nonEmpty[f]++
			}
		}
	}
	var st StageRaw
	for _, ts := range types {
		st.Cases++
		for ty, p := range map[schema.EventType]*int64{schema.Arrival: &st.Arrival, schema.Start: &st.Start, schema.Complete: &st.Complete, schema.Departure: &st.Departure} {
			if ts[ty] {
				*p++
			}
		}
	}
	if got := (Stages{Cases: st.Cases, Arrival: share(st.Arrival, st.Cases), Start: share(st.Start, st.Cases),
		Complete: share(st.Complete, st.Cases), Departure: share(st.Departure, st.Cases)}); r.Stages != got {
		t.Errorf("stages %+v, want %+v", r.Stages, got)
	}
	if c := r.Count(CodeStageNoDepart); c != st.Cases-st.Departure {
		t.Errorf("stage_no_departure %d, want %d", c, st.Cases-st.Departure)
	}
	for _, fc := range r.Completeness {
		if fc.NonEmpty != nonEmpty[fc.Field] {
			t.Errorf("%s: %d non-empty, want %d", fc.Field, fc.NonEmpty, nonEmpty[fc.Field])
		}
	}
	// Waits: one (queue, activity) pair for enqueued waits, one for the
	// queue-less... every start has queue q1 and activity triage here.
	if len(r.Waits) != 1 || r.Waits[0].NoEnqueue != want[CodeWaitNoEnqueue] || r.Waits[0].NoStart != want[CodeWaitNoStart] {
		t.Errorf("waits %+v", r.Waits)
	}
	// Per-site: three sites, with scores.
	if len(r.PerSite) != 3 || r.Sites.Distinct != 3 {
		t.Fatalf("per site %+v", r.PerSite)
	}
	for _, s := range r.PerSite {
		if s.Score == nil || len(s.Dimensions) != 5 || len(s.Completeness) != numFields {
			t.Errorf("site %s: %+v", s.Site, s)
		}
	}
	// Samples: line and case pseudonym only, at most MaxSamples.
	for d, f := range r.Findings() {
		if len(f.Samples) > DefaultMaxSamples {
			t.Errorf("%s/%s: %d samples", d.Name, f.Code, len(f.Samples))
		}
	}
	if s := r.Dimension(DimAccuracy).Findings; len(s) == 0 {
		t.Error("no accuracy findings")
	}
}

// TestScores checks the formulas of SCORING.md on a small stream.
func TestScores(t *testing.T) {
	evs := stream(1, 0, 0)
	r := run(Options{LittleTolerance: 1e9, MappedFields: []schema.Field{schema.FieldSubjectID, schema.FieldQueue}}, evs, nil,
		[]schema.Rejection{{Line: 1, Reason: schema.ReasonMissingRequired}, {Line: 2, Reason: schema.ReasonBadTimestamp}})
	acc := float64(len(evs))
	total := acc + 2
	// queue applies to enqueue, start, abandon and transfer events only
	// (Applies): its share is among those.
	var queue, queueOf float64
	for _, e := range evs {
		switch e.Type {
		case schema.Enqueue, schema.Start, schema.Abandon, schema.Transfer:
			queueOf++
			if e.Queue != "" {
				queue++
			}
		}
	}
	all := &SiteRaw{Counts: map[string]int64{}, NonEmpty: map[schema.Field]int64{}, ByType: map[schema.EventType]TypeRaw{}, Grid: map[string]int64{}}
	for i := range r.Raw.Sites {
		mergeSite(all, &r.Raw.Sites[i])
	}
	wantCompl := 100 * ((1 - 1/total) + 1 + queue/queueOf) / 3
	wantAcc := 100 * (1 - float64(all.AccuracyRows+all.Counts[CodeCaseTooLong]+1)/total)
	wantCons := 100 * (1 - float64(all.ConsistencyRows)/acc)
	wantUniq := 100 * (1 - float64(all.UniquenessRows)/acc)
	for name, w := range map[string]float64{DimCompleteness: wantCompl, DimAccuracy: wantAcc, DimConsistency: wantCons, DimUniqueness: wantUniq} {
		if d := r.Dimension(name); d.Score == nil || *d.Score != round1(w) {
			t.Errorf("%s = %v, want %.1f", name, d.Score, w)
		}
	}
	if d := r.Dimension(DimCurrentness); d.Score != nil {
		t.Errorf("currentness %v, want null (nothing judged)", *d.Score)
	}
	wantScore := (0.25*wantCompl + 0.30*wantAcc + 0.20*wantCons + 0.15*wantUniq) / 0.90
	if r.Score == nil || *r.Score != round1(wantScore) {
		t.Errorf("score %v, want %.1f", r.Score, wantScore)
	}
	if all.AccuracyRows == 0 || all.ConsistencyRows == 0 || all.UniquenessRows == 0 {
		t.Errorf("row counters %d %d %d", all.AccuracyRows, all.ConsistencyRows, all.UniquenessRows)
	}
}

func TestEmptyReport(t *testing.T) {
	r := NewAccumulator(Options{}).Report()
	if r.Score != nil || r.Rows.Total != 0 || len(r.Dimensions) != 5 {
		t.Errorf("empty report %+v", r)
	}
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	if bytes.Contains(b, []byte("null,")) && bytes.Contains(b, []byte(`"findings":null`)) {
		t.Errorf("null list in %s", b)
	}
}

// TestMerge: merging the reports of two halves gives the counts of the
// halves added and scores recomputed; merging one report changes nothing.
func TestMerge(t *testing.T) {
	evs := stream(2, 1, 1)
	h := len(evs) / 2
	whole := run(fixtureOptions(), evs, nil, nil)
	r1 := run(fixtureOptions(), evs[:h], nil, []schema.Rejection{{Line: 1, Reason: schema.ReasonBadTimestamp}})
	r2 := run(fixtureOptions(), evs[h:], nil, []schema.Rejection{{Line: 2, Reason: schema.ReasonBadTimestamp}})
	m, err := MergeReports(r1, r2)
	if err != nil {
		t.Fatal(err)
	}
	if m.Rows != (Rows{Total: int64(len(evs) + 2), Accepted: int64(len(evs)), Rejected: 2}) || m.Raw.Uploads != 2 {
		t.Errorf("merged rows %+v uploads %d", m.Rows, m.Raw.Uploads)
	}
	c1, c2, cm := counted(r1), counted(r2), counted(m)
	for k, v := range c2 {
		c1[k] += v
	}
	// Derived from merged series, not added: gaps, staleness.
	for _, code := range []string{CodeGapHour, CodeGapDay, CodeStaleSite, CodeLittlesLawMismatch} {
		delete(c1, code)
		delete(cm, code)
	}
	if !reflect.DeepEqual(c1, cm) {
		t.Errorf("merged counts %v, want %v", cm, c1)
	}
	// Counts that do not depend on the stream agree with the whole.
	for _, code := range []string{CodeLaterThanUpload, CodeOutsideWindow} {
		if m.Count(code) != whole.Count(code) {
			t.Errorf("%s: merged %d, whole %d", code, m.Count(code), whole.Count(code))
		}
	}
	if !reflect.DeepEqual(m.Completeness, whole.Completeness) || m.Resolution.Grid != whole.Resolution.Grid {
		t.Errorf("completeness or resolution differ after merge")
	}
	one, err := MergeReports(whole)
	if err != nil {
		t.Fatal(err)
	}
	a, _ := json.Marshal(whole)
	b, _ := json.Marshal(one)
	if !bytes.Equal(a, b) {
		t.Errorf("merging one report changed it:\n%s\n%s", a, b)
	}
	// JSON round trip, then merge: the same.
	var back Report
	if err := json.Unmarshal(a, &back); err != nil {
		t.Fatal(err)
	}
	again, err := MergeReports(&back)
	if err != nil {
		t.Fatal(err)
	}
	if c, _ := json.Marshal(again); !bytes.Equal(a, c) {
		t.Errorf("round trip and merge changed the report")
	}
	bad := *whole
	bad.Version = "1"
	if _, err := MergeReports(whole, &bad); err == nil {
		t.Error("merged reports of different formats")
	}
}

// TestResolutionMidnight: events all at local midnight are day
// resolution in the local zone, hour resolution in UTC (Amsterdam is
// UTC+1/+2).
func TestResolutionMidnight(t *testing.T) {
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	var evs []schema.Event
	for d := range 400 { // spans both DST changes
		at := time.Date(2024, 1, 1+d, 0, 0, 0, 0, ams)
		evs = append(evs, schema.Event{Site: "x", CaseID: "c" + at.Format("20060102"), Type: schema.Arrival, OccurredAt: at.UTC(), Line: int64(d + 2)})
	}
	if g := run(Options{Zone: ams}, evs, nil, nil).Resolution.Grid; g != "day" {
		t.Errorf("local midnights: resolution %s, want day", g)
	}
	if g := run(Options{}, evs, nil, nil).Resolution.Grid; g != "hour" {
		t.Errorf("local midnights read in UTC: resolution %s, want hour", g)
	}
	// One event at a millisecond: millisecond.
	evs[7].OccurredAt = evs[7].OccurredAt.Add(3 * time.Millisecond)
	r := run(Options{Zone: ams}, evs, nil, nil)
	if r.Resolution.Grid != "millisecond" {
		t.Errorf("resolution %s, want millisecond", r.Resolution.Grid)
	}
	// 399 of 400 events on whole hours against 1/3600 expected: heaped.
	var heaped []string
	for _, h := range r.Resolution.Heaping {
		if h.Heaped {
			heaped = append(heaped, h.Grid)
		}
	}
	if want := []string{"minute", "5_minutes", "15_minutes", "hour"}; !reflect.DeepEqual(heaped, want) {
		t.Errorf("heaped grids %v, want %v", heaped, want)
	}
}

// lifeStream: a stationary system, one case arriving every 10 minutes
// for days, each staying one hour (start at +10 min, complete at +50).
func lifeStream(days int, dropDepartureEvery int) []schema.Event {
	var evs []schema.Event
	base := time.Date(2024, 5, 6, 0, 0, 0, 0, time.UTC) // a Monday
	n := days * 24 * 6
	for i := range n {
		at := base.Add(time.Duration(i) * 10 * time.Minute)
		id := "c" + at.Format("0102150405")
		evs = append(evs,
			schema.Event{Site: "x", CaseID: id, Type: schema.Arrival, OccurredAt: at},
			schema.Event{Site: "x", CaseID: id, Type: schema.Start, OccurredAt: at.Add(10 * time.Minute)},
			schema.Event{Site: "x", CaseID: id, Type: schema.Complete, OccurredAt: at.Add(50 * time.Minute)})
		if dropDepartureEvery == 0 || i%dropDepartureEvery != 0 {
			evs = append(evs, schema.Event{Site: "x", CaseID: id, Type: schema.Departure, OccurredAt: at.Add(time.Hour)})
		}
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	for i := range evs {
		evs[i].Line = int64(i + 2)
	}
	return evs
}

func TestLittlesLaw(t *testing.T) {
	intact := run(Options{}, lifeStream(7, 0), nil, nil)
	l := intact.Little[0]
	// L = λ·W = 6/h · 1 h = 6 (Little's law, L = λW; from memory). The
	// window ends at the last departure, so the edge costs well under 1%.
	if !l.Judged || l.Flagged || l.Exits != 7*24*6 || l.W != 1 || l.Ratio < 0.99 || l.Ratio > 1.01 {
		t.Errorf("intact: %+v", l)
	}
	if intact.Count(CodeLittlesLawMismatch) != 0 {
		t.Error("intact stream flagged")
	}
	// The census's minimum over time is not computed, so not reported
	// (reports up to stop 35 said 0).
	if b, _ := json.Marshal(intact); bytes.Contains(b, []byte(`"census_min"`)) || bytes.Contains(b, []byte(`"min":0}`)) {
		t.Error("the report carries a census minimum it does not compute")
	}
	// Every 10th departure deleted: those cases stay "in system" to the
	// end, L grows, λ·W does not.
	lost := run(Options{}, lifeStream(7, 10), nil, nil)
	l = lost.Little[0]
	if !l.Judged || !l.Flagged || l.Ratio < 2 {
		t.Errorf("lost departures: %+v", l)
	}
	if lost.Count(CodeLittlesLawMismatch) != 1 {
		t.Errorf("lost departures: %d mismatches, want 1", lost.Count(CodeLittlesLawMismatch))
	}
	if *lost.Dimension(DimConsistency).Score >= *intact.Dimension(DimConsistency).Score {
		t.Error("mismatch did not lower consistency")
	}
}

// TestGaps deletes one busy hour and one whole day from four weeks of
// steady traffic: 25 gap hours (1 + 24) and one gap day.
func TestGaps(t *testing.T) {
	evs := lifeStream(28, 0)
	hour := time.Date(2024, 5, 8, 14, 0, 0, 0, time.UTC)
	day := time.Date(2024, 5, 22, 0, 0, 0, 0, time.UTC)
	evs = slices.DeleteFunc(evs, func(e schema.Event) bool {
		t := e.OccurredAt
		return !t.Before(hour) && t.Before(hour.Add(time.Hour)) || !t.Before(day) && t.Before(day.Add(24*time.Hour))
	})
	r := run(Options{UploadedAt: time.Date(2024, 6, 10, 0, 0, 0, 0, time.UTC)}, evs, nil, nil)
	c := r.Currentness[0]
	if c.GapHours != 25 || c.GapDays != 1 {
		t.Errorf("gaps %+v, want 25 hours and 1 day", c)
	}
	if r.Count(CodeGapHour) != 25 || r.Count(CodeGapDay) != 1 {
		t.Errorf("findings: %d gap hours, %d gap days", r.Count(CodeGapHour), r.Count(CodeGapDay))
	}
	if want := 100 * (1 - 25/float64(c.JudgedHours)); *r.Dimension(DimCurrentness).Score != round1(want) {
		t.Errorf("currentness %v, want %.1f", *r.Dimension(DimCurrentness).Score, want)
	}
	if c.Stale || c.LagMaxSeconds == nil || *c.LagMaxSeconds != int64(time.Date(2024, 6, 10, 0, 0, 0, 0, time.UTC).Sub(evs[0].OccurredAt).Seconds()) {
		t.Errorf("lag %+v", c)
	}
	intact := run(Options{}, lifeStream(28, 0), nil, nil)
	if intact.Count(CodeGapHour) != 0 || intact.Currentness[0].JudgedHours == 0 {
		t.Errorf("intact: %+v", intact.Currentness[0])
	}
}

func TestLagBuckets(t *testing.T) {
	for _, s := range []int64{0, 1, 7, 8, 9, 15, 16, 17, 100, 3600, 86400, 1 << 40} {
		lo, hi := lagBounds(lagBucket(s))
		if s < lo || s >= hi || float64(hi-lo) > max(1, float64(lo)/8) {
			t.Errorf("lag %d in bucket [%d, %d)", s, lo, hi)
		}
	}
}

func TestOrderBreach(t *testing.T) {
	evs := stream(1, 0, 0)
	evs[3], evs[9] = evs[9], evs[3]
	r := run(Options{}, evs, nil, nil)
	if len(r.Internal) != 1 || r.Internal[0].Code != CodeOrderBreach || r.Internal[0].Count == 0 {
		t.Errorf("internal %+v", r.Internal)
	}
}

func TestText(t *testing.T) {
	r := run(fixtureOptions(), stream(2, 1, 1), nil, []schema.Rejection{{Line: 3, Reason: schema.ReasonBadTimestamp}})
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
	if !strings.Contains(color.String(), "\x1b[") {
		t.Error("no colour")
	}
	// Sentences are wrapped to TextWidth; compare them with the line
	// breaks taken out.
	flat := strings.Join(strings.Fields(plain.String()), " ")
	for _, want := range []string{"quality report (format 4)", "site", "(all)", "north", "exact_duplicate", "resource_overlap", "accuracy",
		"complete", "consistent", "currentness and uniqueness",
		"what the findings mean", "exact_duplicate: " + whyOf(CodeExactDuplicate), "first rejected rows", "bad_timestamp: line 3"} {
		if !strings.Contains(flat, want) {
			t.Errorf("text lacks %q:\n%s", want, plain.String())
		}
	}
	for i, l := range strings.Split(plain.String(), "\n") {
		if n := len([]rune(l)); n > TextWidth {
			t.Errorf("line %d is %d columns wide, over %d: %q", i+1, n, TextWidth, l)
		}
	}
}

// The report must not hold identifier values other than case pseudonyms
// in samples: subject and resource values must not appear, nor the text
// of a rejected identifier field (even one a caller set by mistake). The
// offending text of a non-identifier field, and the message, are kept.
func TestNoValuesInReport(t *testing.T) {
	rejs := []schema.Rejection{
		{Line: 3, Field: schema.FieldOccurredAt, Reason: schema.ReasonBadTimestamp, Message: `"2026-13-01" is not an RFC 3339 / ISO 8601 timestamp`, Text: "2026-13-01"},
		{Line: 4, Field: schema.FieldCaseID, Reason: schema.ReasonUnknownCode, Message: "the value is not listed under codes", Text: "secret-case"},
		{Line: 5, Field: schema.FieldInstanceID, Reason: schema.ReasonBadValue, Message: "the value is an object", Text: "secret-inst"},
	}
	r := run(fixtureOptions(), stream(2, 1, 1), nil, rejs)
	b, _ := json.Marshal(r)
	for _, v := range []string{"subj-", "R-", "shared-", "secret"} {
		if bytes.Contains(b, []byte(v)) {
			t.Errorf("report holds value %s", v)
		}
	}
	var texts []string
	for _, rc := range r.Rejections {
		for _, s := range rc.Samples {
			texts = append(texts, s.Text+"|"+s.Message)
		}
	}
	slices.Sort(texts)
	want := []string{"2026-13-01|" + rejs[0].Message, "|" + rejs[1].Message, "|" + rejs[2].Message}
	slices.Sort(want)
	if !slices.Equal(texts, want) {
		t.Errorf("rejection samples %q, want %q", texts, want)
	}
}

// TestMergeManyNames merges reports with many unmapped columns, queues
// and sites. A merge that searched a list for each name would take
// quadratic time here (10^10 comparisons) and not finish within the test
// timeout; the result must be the exact union.
func TestMergeManyNames(t *testing.T) {
	const n = 100000
	mk := func(off int) *Report {
		r := run(fixtureOptions(), nil, nil, nil)
		r.UnmappedColumns = nil
		for i := range n {
			r.UnmappedColumns = append(r.UnmappedColumns, fmt.Sprintf("col-%07d", off+i))
		}
		r.Raw.Waits = nil
		for i := range n {
			r.Raw.Waits = append(r.Raw.Waits, WaitRaw{Queue: fmt.Sprintf("q-%07d", off+i), Activity: "a", Waits: 1})
		}
		return r
	}
	m, err := MergeReports(mk(0), mk(n/2))
	if err != nil {
		t.Fatal(err)
	}
	if len(m.UnmappedColumns) != n+n/2 || m.UnmappedColumns[0] != "col-0000000" || m.UnmappedColumns[len(m.UnmappedColumns)-1] != fmt.Sprintf("col-%07d", n+n/2-1) {
		t.Errorf("%d unmapped columns, %q .. %q", len(m.UnmappedColumns), m.UnmappedColumns[0], m.UnmappedColumns[len(m.UnmappedColumns)-1])
	}
	// 150,000 pairs: the ListedWaits with the most waits listed (the
	// 50,000 both reports hold have two; ties by name), the rest folded,
	// every wait counted once.
	var waits int64
	for _, w := range m.Raw.Waits {
		waits += w.Waits
	}
	f := m.Raw.WaitsFolded
	if len(m.Raw.Waits) != ListedWaits || f == nil || f.Pairs != n+n/2-ListedWaits || waits+f.Waits != 2*n {
		t.Fatalf("%d wait groups holding %d waits, folded %+v; want %d listed, %d folded, %d waits in all", len(m.Raw.Waits), waits, f, ListedWaits, n+n/2-ListedWaits, 2*n)
	}
	if first, last := m.Raw.Waits[0], m.Raw.Waits[ListedWaits-1]; first.Queue != "q-0050000" || last.Queue != fmt.Sprintf("q-%07d", n/2+ListedWaits-1) || first.Waits != 2 || last.Waits != 2 {
		t.Errorf("listed %+v .. %+v; want the first %d pairs with two waits, by name", first, last, ListedWaits)
	}
	if rf := m.WaitsFolded; rf == nil || rf.Pairs != f.Pairs || rf.Waits != f.Waits || len(m.Waits) != ListedWaits {
		t.Errorf("report: %d waits listed, folded %+v; want the raw's %+v", len(m.Waits), rf, f)
	}
}

// TestMergeHoursFarApart: hour series more than 292 years apart (the
// reach of a time.Duration) merge as two runs at their true starts, not
// as one series of the 2.6 million hours between.
func TestMergeHoursFarApart(t *testing.T) {
	a := time.Date(1700, 1, 1, 0, 0, 0, 0, time.UTC)
	b := time.Date(2000, 1, 1, 5, 0, 0, 0, time.UTC)
	m := mergeHours(HourSeries{Runs: []HourRun{{Start: b, Counts: []int64{2}}}}, HourSeries{Runs: []HourRun{{Start: a, Counts: []int64{1}}}})
	if len(m.Runs) != 2 || !m.Runs[0].Start.Equal(a) || !m.Runs[1].Start.Equal(b) || m.Runs[0].Counts[0] != 1 || m.Runs[1].Counts[0] != 2 || len(m.Runs[0].Counts)+len(m.Runs[1].Counts) != 2 {
		t.Errorf("merged runs %+v; want 1700-01-01 [1] and 2000-01-01T05 [2]", m.Runs)
	}
}

// TestLessRepeats: merging a file's report less the rejected rows an
// earlier file counted gives the report of a merge in which the later
// file never held them (the same JSON but for rows.rejected_again), and
// the repeated row's sample is gone.
func TestLessRepeats(t *testing.T) {
	evs := stream(2, 1, 1)
	h := len(evs) / 2
	bad := schema.Rejection{Line: 7, Reason: schema.ReasonBadTimestamp, Message: "x"}
	r1 := run(fixtureOptions(), evs[:h], nil, []schema.Rejection{bad})
	resent := bad
	resent.Line = 3 // the same row, elsewhere in the later file
	other := schema.Rejection{Line: 9, Reason: schema.ReasonBadTimestamp, Message: "y"}
	short := schema.Rejection{Line: 4, Reason: schema.ReasonFieldCount, Message: "z"}
	r2 := run(fixtureOptions(), evs[h:], nil, []schema.Rejection{resent, other, short})
	without := run(fixtureOptions(), evs[h:], nil, []schema.Rejection{other, short})

	var rp Repeats
	rp.Add(schema.ReasonBadTimestamp, 3)
	got, err := MergeReports(r1, LessRepeats(r2, rp))
	if err != nil {
		t.Fatal(err)
	}
	want, err := MergeReports(r1, without)
	if err != nil {
		t.Fatal(err)
	}
	if got.Rows.Again != 1 || got.Rows.Rejected != 3 || got.Rows.Total != int64(len(evs))+3 {
		t.Fatalf("rows %+v, want 3 rejected, %d total, 1 again", got.Rows, len(evs)+3)
	}
	got.Rows.Again = 0
	a, _ := json.Marshal(got)
	b, _ := json.Marshal(want)
	if !bytes.Equal(a, b) {
		t.Errorf("merge less repeats:\n%s\nwant\n%s", a, b)
	}
	if r2.Rows.Rejected != 3 || len(r2.Rejections) != 2 {
		t.Errorf("LessRepeats changed its argument: %+v", r2.Rows)
	}
	var text bytes.Buffer
	got.Rows.Again = 1
	if err := got.Text(&text, false); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(text.String(), "1 rejected row sent again by a later file (the same text), counted once above") {
		t.Errorf("text report does not tell the row sent again:\n%s", text.String())
	}
}
