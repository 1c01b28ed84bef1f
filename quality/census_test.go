package quality

import (
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/schema"
)

// contactLine generates a clean contact line over days: calls arrive at
// 30 an hour (Poisson), wait (exponential, mean 3 min) and are answered,
// or hang up first (patience exponential, mean 12 min): an answered call
// ends with complete then departure, an abandoned one with abandon alone
// (the caller hung up; nothing departs). dropEvery > 0 deletes every
// dropEvery-th departure.
func contactLine(seed uint64, days int, dropEvery int) []schema.Event {
	r := rand.New(rand.NewPCG(seed, 1))
	base := time.Date(2025, 3, 3, 0, 0, 0, 0, time.UTC)
	end := base.Add(time.Duration(days) * 24 * time.Hour)
	var evs []schema.Event
	at := base
	deps := 0
	for i := 0; ; i++ {
		at = at.Add(time.Duration(r.ExpFloat64() * float64(2*time.Minute)))
		if !at.Before(end) {
			break
		}
		id := "call" + strconv.Itoa(i)
		ev := func(t schema.EventType, d time.Time) {
			evs = append(evs, schema.Event{Site: "line", CaseID: id, Type: t, Queue: "q", Activity: "call", OccurredAt: d.Truncate(time.Second)})
		}
		ev(schema.Arrival, at)
		wait := time.Duration(r.ExpFloat64()*float64(3*time.Minute)) + time.Second
		patience := time.Duration(r.ExpFloat64()*float64(12*time.Minute)) + time.Second
		if patience < wait {
			ev(schema.Abandon, at.Add(patience))
			continue
		}
		talk := time.Duration(r.ExpFloat64()*float64(5*time.Minute)) + time.Second
		ev(schema.Start, at.Add(wait))
		ev(schema.Complete, at.Add(wait+talk))
		deps++
		if dropEvery > 0 && deps%dropEvery == 0 {
			continue
		}
		ev(schema.Departure, at.Add(wait+talk+10*time.Second))
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	for i := range evs {
		evs[i].Line = int64(i + 2)
	}
	return evs
}

// TestContactLineCensus: abandons end a call's presence, so a clean line
// has no census or Little's-law finding, and the two sides of the law,
// measured apart, agree within 2% (L = λW, Little 1961; from memory). With
// 3% of departures deleted those calls stay in the census to the end of
// the data: flagged.
func TestContactLineCensus(t *testing.T) {
	clean := contactLine(7, 5, 0)
	r := run(Options{}, clean, nil, nil)
	l := r.Little[0]
	if !l.Judged || l.Flagged || math.Abs(l.Ratio-1) > 0.02 {
		t.Errorf("clean line: %+v", l)
	}
	if n := r.Count(CodeLittlesLawMismatch) + r.Count(CodeCensusNegative); n != 0 {
		t.Errorf("clean line: %d census or Little findings", n)
	}
	var abandons int64
	for _, e := range clean {
		if e.Type == schema.Abandon {
			abandons++
		}
	}
	if abandons < 100 || l.Exits != l.Entries {
		t.Errorf("clean line: %d abandons, %d entries, %d exits: every call leaves", abandons, l.Entries, l.Exits)
	}
	// The summary shows both sides too, from the one per-case computation.
	sa := summary.New(summary.Options{})
	sa.ObserveAll(clean)
	sl := sa.Summary().Occupancy.Little
	t.Logf("clean line: report ratio %.4f (%d entries), summary ratio %.4f", l.Ratio, l.Entries, sl.Ratio)
	if !sl.Judged || math.Abs(sl.Ratio-1) > 0.02 || sl.Entries != uint64(l.Entries) {
		t.Errorf("clean line, summary: %+v", sl)
	}

	lost := contactLine(7, 5, 33) // 3% of the departures deleted
	r = run(Options{}, lost, nil, nil)
	l = r.Little[0]
	t.Logf("3%% of departures lost: report ratio %.4f", l.Ratio)
	if !l.Judged || !l.Flagged || r.Count(CodeLittlesLawMismatch) != 1 {
		t.Errorf("3%% of departures lost: %+v", l)
	}
	sa = summary.New(summary.Options{})
	sa.ObserveAll(lost)
	if sl := sa.Summary().Occupancy.Little; !sl.Judged || sl.Ratio < 1.1 {
		t.Errorf("3%% of departures lost, summary: %+v", sl)
	}

	// A profile that declares complete terminal takes calls out at their
	// complete: a line without departures at all is clean then.
	var noDep []schema.Event
	for _, e := range clean {
		if e.Type != schema.Departure {
			noDep = append(noDep, e)
		}
	}
	r = run(Options{Terminal: []schema.EventType{schema.Complete}}, noDep, nil, nil)
	if l := r.Little[0]; !l.Judged || l.Flagged || math.Abs(l.Ratio-1) > 0.02 {
		t.Errorf("complete terminal: %+v", l)
	}
	r = run(Options{}, noDep, nil, nil)
	if l := r.Little[0]; l.Judged && !l.Flagged {
		t.Errorf("no departures, nothing terminal, judged and not flagged: %+v", l)
	}
}

// TestDateOnlyFixedOffset: dates read as midnight at +01:00 and stored in
// UTC sit at 23:00 UTC every day (in a zone with summer time their local
// clock time moves). They are day resolution with the artefact named, and
// no hour is judged for gaps.
func TestDateOnlyFixedOffset(t *testing.T) {
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	var evs []schema.Event
	base := time.Date(2025, 2, 1, 23, 0, 0, 0, time.UTC) // 2025-02-02 at +01:00
	for d := range 120 {
		for k := range 20 {
			id := "d" + strconv.Itoa(d*100+k)
			evs = append(evs, schema.Event{Site: "s", CaseID: id, Type: schema.Complete, Activity: "visit", OccurredAt: base.AddDate(0, 0, d)})
		}
	}
	for i := range evs {
		evs[i].Line = int64(i + 2)
	}
	r := run(Options{Zone: ams}, evs, nil, nil)
	res := r.Resolution
	if res.Grid != "day" || !res.DateOnly || res.Artefact == "" || !containsAll(res.Artefact, "23:00:00 UTC", "+01:00") {
		t.Errorf("resolution %+v", res)
	}
	if r.Count(CodeGapHour) != 0 || r.Currentness[0].JudgedHours != 0 {
		t.Errorf("date-only data judged by the hour: %d gap hours of %d judged", r.Count(CodeGapHour), r.Currentness[0].JudgedHours)
	}
	// The same times with one event an hour later are times, not dates.
	evs[5].OccurredAt = evs[5].OccurredAt.Add(time.Hour)
	if res := run(Options{Zone: ams}, evs, nil, nil).Resolution; res.DateOnly || res.Grid == "day" {
		t.Errorf("one event off the clock time: %+v", res)
	}
}

func containsAll(s string, subs ...string) bool {
	for _, x := range subs {
		if !strings.Contains(s, x) {
			return false
		}
	}
	return true
}

// TestCompletenessWhereApplies: a resource is named on every start and
// complete of a clean contact line and on no arrival, abandon or
// departure, where none can apply: completeness is whole.
func TestCompletenessWhereApplies(t *testing.T) {
	evs := contactLine(3, 2, 0)
	for i := range evs {
		if evs[i].Type == schema.Start || evs[i].Type == schema.Complete {
			evs[i].ResourceID = "agent" + strconv.Itoa(i%7)
		}
	}
	r := run(Options{MappedFields: []schema.Field{schema.FieldResourceID, schema.FieldQueue, schema.FieldActivity}}, evs, nil, nil)
	if d := r.Dimension(DimCompleteness); d.Score == nil || *d.Score != 100 {
		t.Errorf("completeness %v, want 100", d.Score)
	}
	for _, fc := range r.Completeness {
		if fc.Field == schema.FieldResourceID && (fc.ApplicableShare != 1 || fc.Share >= 1) {
			t.Errorf("resource_id %+v: every start and complete names one, arrivals none", fc)
		}
	}
	if n := r.Count(CodeEmptyValue); n != 0 {
		t.Errorf("%d empty values where fields apply", n)
	}
}

// TestLostCompleteBound: one agent answers a call every 6 minutes, each
// lasting 4 to 5 minutes; one complete is lost. The lost service closes
// at twice the longest service the activity has shown (10 minutes), not
// after 24 hours, so it overlaps at most the next start, not the day's.
func TestLostCompleteBound(t *testing.T) {
	base := time.Date(2025, 3, 3, 8, 0, 0, 0, time.UTC)
	var evs []schema.Event
	for i := range 120 {
		at := base.Add(time.Duration(i) * 6 * time.Minute)
		id := "c" + strconv.Itoa(i)
		evs = append(evs, schema.Event{Site: "s", CaseID: id, Type: schema.Start, Activity: "call", ResourceID: "a1", OccurredAt: at})
		if i != 60 {
			evs = append(evs, schema.Event{Site: "s", CaseID: id, Type: schema.Complete, Activity: "call", ResourceID: "a1",
				OccurredAt: at.Add(4*time.Minute + time.Duration(i%60)*time.Second)})
		}
	}
	for i := range evs {
		evs[i].Line = int64(i + 2)
	}
	r := run(Options{}, evs, nil, nil)
	if n := r.Count(CodeResourceOverlap); n > 1 {
		t.Errorf("%d resource overlaps from one lost complete, want at most 1", n)
	}
	// Before 20 services are measured, the configured maximum holds: a
	// complete lost at the start overlaps the starts until the bound is
	// learned, then no more.
	evs = slices.DeleteFunc(evs, func(e schema.Event) bool { return e.CaseID == "c1" && e.Type == schema.Complete })
	r = run(Options{}, evs, nil, nil)
	if n := r.Count(CodeResourceOverlap); n < 15 || n > 25 {
		t.Errorf("%d overlaps from a complete lost before 20 services were measured, want about 20", n)
	}
}

// TestHistoricalNotCurrent: a week of events uploaded a year later is
// stale and judged for gaps as a feed; marked historical it is not
// scored on currentness at all.
func TestHistoricalNotCurrent(t *testing.T) {
	evs := contactLine(5, 28, 0)
	up := evs[len(evs)-1].OccurredAt.AddDate(1, 0, 0)
	feed := run(Options{UploadedAt: up}, evs, nil, nil)
	if !feed.Currentness[0].Stale || feed.Count(CodeStaleSite) == 0 {
		t.Errorf("feed: currentness %+v", feed.Currentness[0])
	}
	hist := run(Options{UploadedAt: up, Historical: true}, evs, nil, nil)
	if c := hist.Currentness[0]; c.Stale || c.JudgedHours != 0 || hist.Dimension(DimCurrentness).Score != nil || hist.Count(CodeStaleSite) != 0 {
		t.Errorf("historical: currentness %+v, score %v", c, hist.Dimension(DimCurrentness).Score)
	}
}

// TestResourceCapacity: agents who each hold two calls at once overlap at
// the default capacity of one, not at a capacity of two; the report shows
// the most services one resource held at once either way.
func TestResourceCapacity(t *testing.T) {
	base := time.Date(2025, 3, 3, 8, 0, 0, 0, time.UTC)
	var evs []schema.Event
	for i := range 100 {
		at := base.Add(time.Duration(i/2) * 10 * time.Minute) // two calls per 10 minutes
		id := "c" + strconv.Itoa(i)
		res := "a" + strconv.Itoa(i%3)
		evs = append(evs,
			schema.Event{Site: "s", CaseID: id, Type: schema.Start, Activity: "call", ResourceID: res, OccurredAt: at.Add(time.Duration(i%2) * time.Minute)},
			schema.Event{Site: "s", CaseID: id, Type: schema.Complete, Activity: "call", ResourceID: res, OccurredAt: at.Add(time.Duration(i%2)*time.Minute + 25*time.Minute)})
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	for i := range evs {
		evs[i].Line = int64(i + 2)
	}
	one := run(Options{}, evs, nil, nil)
	two := run(Options{ResourceCapacity: 2}, evs, nil, nil)
	if one.Count(CodeResourceOverlap) == 0 || two.Count(CodeResourceOverlap) != 0 {
		t.Errorf("overlaps at capacity 1: %d, at 2: %d", one.Count(CodeResourceOverlap), two.Count(CodeResourceOverlap))
	}
	if one.Raw.ResourcePeak != two.Raw.ResourcePeak || one.Raw.ResourcePeak != 2 {
		t.Errorf("resource peak %d and %d", one.Raw.ResourcePeak, two.Raw.ResourcePeak)
	}
	t.Logf("peak %d services at one resource; %d overlaps at capacity 1", one.Raw.ResourcePeak, one.Count(CodeResourceOverlap))
}
