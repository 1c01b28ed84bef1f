package summary

import (
	"bytes"
	"compress/gzip"
	"encoding/csv"
	"encoding/json"
	"errors"
	"io"
	"math"
	"os"
	"regexp"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

func ev(t schema.EventType, id, clock string) schema.Event {
	at, err := time.Parse(time.RFC3339, "2026-03-02T"+clock+"Z")
	if err != nil {
		panic(err)
	}
	return schema.Event{Site: "s", CaseID: id, Type: t, Queue: "q", OccurredAt: at}
}

// TestLittleFixture checks occupancy and L = λW on three cases worked by
// hand (UTC, 1-hour buckets, Monday 2026-03-02):
//
//	A 00:00-02:00, B 00:30-01:30, C 01:00-03:00; T = 3 h, Σ stays = 5 h.
//	Bucket means: [00,01) A 1 + B 0.5 = 1.5; [01,02) A 1 + B 0.5 + C 1 = 2.5;
//	[02,03) C 1 = 1.0; [03,04) 0 (C leaves at 03:00).
//	L = 5 h / 3 h = 5/3; λ = 3 cases / 3 h = 1/h; W = 5/3 h; λW = 5/3.
func TestLittleFixture(t *testing.T) {
	evs := []schema.Event{
		ev(schema.Arrival, "A", "00:00:00"), ev(schema.Arrival, "B", "00:30:00"),
		ev(schema.Arrival, "C", "01:00:00"), ev(schema.Departure, "B", "01:30:00"),
		ev(schema.Departure, "A", "02:00:00"), ev(schema.Departure, "C", "03:00:00"),
	}
	a := New(Options{})
	a.ObserveAll(evs)
	s := a.Summary()
	o := s.Occupancy
	if len(o.Runs) != 1 || !slices.Equal(o.Runs[0].Series, []float64{1.5, 2.5, 1.0, 0}) {
		t.Errorf("runs %+v", o.Runs)
	}
	if o.Peak != 2.5 || o.PeakAt.Hour() != 1 {
		t.Errorf("peak %v at %v", o.Peak, o.PeakAt)
	}
	l := o.Little
	if l.Seconds != 3*3600 || math.Abs(l.L-5.0/3) > 1e-12 || math.Abs(l.Lambda*3600-1) > 1e-12 ||
		math.Abs(l.W-5.0/3*3600) > 1e-9 || math.Abs(l.LambdaW-5.0/3) > 1e-12 || math.Abs(l.Ratio-1) > 1e-12 {
		t.Errorf("little %+v", l)
	}
	// Hours of week: Monday 00:00 is bin 0.
	if o.HourOfWeek[0] != 1.5 || o.HourOfWeek[1] != 2.5 || s.Arrivals.HourOfWeek[0].Count != 2 || s.Arrivals.HourOfWeek[1].Count != 1 {
		t.Errorf("hour of week %v %v", o.HourOfWeek[:4], s.Arrivals.HourOfWeek[:2])
	}
	// Exposure: the hours holding 00:00, 01:00, 02:00 and the last event at
	// 03:00; hour 04 was not observed.
	if s.Cases.Value != 3 || !s.Cases.Exact || s.ExposureHours != 4 || s.LengthOfStay.P50 != 7200 {
		t.Errorf("cases %+v exposure %d los %+v", s.Cases, s.ExposureHours, s.LengthOfStay.Durations)
	}
	if s.Arrivals.HourOfDay[4].Hours != 0 || s.Arrivals.HourOfDay[3].Hours != 1 {
		t.Errorf("exposure of 03 h and 04 h: %+v %+v", s.Arrivals.HourOfDay[3], s.Arrivals.HourOfDay[4])
	}
	// One hour observed: the mean per hour is the count; Garwood bounds for 2.
	r := s.Arrivals.HourOfDay[0]
	lo, hi := PoissonExactCI(2, 0.95)
	if r.Hours != 1 || r.Mean != 2 || r.Lower != lo || r.Upper != hi {
		t.Errorf("rate %+v", r)
	}
}

func TestLocalHours(t *testing.T) {
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	a := New(Options{Location: ams})
	// 2026-03-29 is the spring change in Europe/Amsterdam (from UTC+1 to
	// UTC+2 at 01:00 UTC); Sunday is day 6 of the week.
	for _, c := range []struct {
		utc  string
		how  int
		date string
	}{
		{"2026-03-29T00:30:00Z", 6*24 + 1, "2026-03-29"},
		{"2026-03-29T01:30:00Z", 6*24 + 3, "2026-03-29"},
		{"2026-03-29T22:30:00Z", 0*24 + 0, "2026-03-30"},
		{"2026-01-05T00:00:00Z", 0*24 + 1, "2026-01-05"},
	} {
		at, _ := time.Parse(time.RFC3339, c.utc)
		how, day := a.local(at.UnixMicro())
		if how != c.how || time.Unix(int64(day)*86400, 0).UTC().Format("2006-01-02") != c.date {
			t.Errorf("%s: hour of week %d day %d, want %d %s", c.utc, how, day, c.how, c.date)
		}
	}
}

func jsonOf(t *testing.T, s *Summary) string {
	t.Helper()
	b, err := json.Marshal(s)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func roundTrip(t *testing.T, a *Accumulator) *Accumulator {
	t.Helper()
	b, err := a.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	x := New(Options{})
	if err := x.UnmarshalBinary(b); err != nil {
		t.Fatal(err)
	}
	return x
}

func TestMerge(t *testing.T) {
	for _, n := range []int{300, 20_000} { // exact and collapsed distributions
		mu := 1.0 / 60
		a1 := simulateMMc(3, n, 3, 2.4*mu, mu)
		b1 := simulateMMc(4, n, 3, 2.4*mu, mu)
		base := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
		// B starts a day after A's last departure: no case spans the split.
		baseB := base.Add(time.Duration(a1[n-1].end)*time.Microsecond + 24*time.Hour)

		one := New(Options{})
		observeCustomers(one, base, "a", a1)
		observeCustomers(one, baseB, "b", b1)
		// Process views are part of the state: merged, they equal one
		// pass's.
		ones := one.Summary()
		if ones.Process == nil || len(ones.Process.Variants) == 0 || ones.Process.Variants[0].Cases != uint64(2*n) {
			t.Fatalf("one pass: process views %+v, want one variant of %d cases", ones.Process, 2*n)
		}
		want := jsonOf(t, ones)
		wantBytes, _ := one.MarshalBinary()

		pa, pb := New(Options{}), New(Options{})
		observeCustomers(pa, base, "a", a1)
		observeCustomers(pb, baseB, "b", b1)
		m := roundTrip(t, pa)
		if err := m.Merge(roundTrip(t, pb)); err != nil {
			t.Fatal(err)
		}
		if got := jsonOf(t, m.Summary()); got != want {
			t.Errorf("n=%d: merged summary differs from one pass", n)
		}
		if got, _ := m.MarshalBinary(); !bytes.Equal(got, wantBytes) {
			t.Errorf("n=%d: merged state differs from one pass", n)
		}
		if got := jsonOf(t, roundTrip(t, m).Summary()); got != want {
			t.Errorf("n=%d: summary changed by a round trip", n)
		}
		// Merging in the other order gives the same summary.
		m2 := roundTrip(t, pb)
		if err := m2.Merge(pa); err != nil {
			t.Fatal(err)
		}
		if got := jsonOf(t, m2.Summary()); got != want {
			t.Errorf("n=%d: merge order matters", n)
		}
		s := m.Summary()
		if (s.Cases.Exact && s.Cases.Value != float64(2*n)) || s.Events != uint64(8*n) {
			t.Errorf("n=%d: cases %+v events %d", n, s.Cases, s.Events)
		}
		if n > DefaultExactValues && s.Queues[0].Wait.Exact {
			t.Errorf("n=%d: waits still exact", n)
		}
		if n > distinctCap/2 && s.Cases.Exact {
			t.Errorf("n=%d: case count still exact", n)
		}
		if n > distinctCap/2 && math.Abs(s.Cases.Value/float64(2*n)-1) > 4*HLLRelStdError {
			t.Errorf("n=%d: HLL cases %v", n, s.Cases.Value)
		}
	}
}

func TestMergeErrors(t *testing.T) {
	a := New(Options{})
	if err := a.Merge(New(Options{Resolution: time.Minute})); !errors.Is(err, ErrIncompatible) {
		t.Errorf("merge: %v", err)
	}
	b, _ := a.MarshalBinary()
	for _, bad := range [][]byte{nil, []byte("nope"), b[:len(b)-1], append(slices.Clone(b), 0)} {
		if err := New(Options{}).UnmarshalBinary(bad); !errors.Is(err, ErrCorrupt) {
			t.Errorf("unmarshal %d bytes: %v", len(bad), err)
		}
	}
}

// TestSepsis checks length of stay and arrivals by hour of day on the
// public sepsis log against a computation with the standard library only.
func TestSepsis(t *testing.T) {
	const dir = "../../testdata/sepsis/"
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	// Independent: encoding/csv and time.ParseInLocation.
	f, err := os.Open(dir + "sepsis-cases.csv.gz")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	cr := csv.NewReader(zr)
	cr.Comma = ';'
	head, err := cr.Read()
	if err != nil {
		t.Fatal(err)
	}
	ci, ti := slices.Index(head, "Case ID"), slices.Index(head, "Complete Timestamp")
	type span struct{ first, last time.Time }
	spans := map[string]*span{}
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		at, err := time.ParseInLocation("2006/01/02 15:04:05.000", rec[ti], ams)
		if err != nil {
			t.Fatal(err)
		}
		s := spans[rec[ci]]
		if s == nil {
			spans[rec[ci]] = &span{at, at}
			continue
		}
		if at.Before(s.first) {
			s.first = at
		}
		if at.After(s.last) {
			s.last = at
		}
	}
	var stays []float64
	var hours [24]uint64
	for _, s := range spans {
		stays = append(stays, s.last.Sub(s.first).Seconds())
		hours[s.first.In(ams).Hour()]++
	}
	slices.Sort(stays)
	q7 := func(p float64) float64 { // Hyndman-Fan type 7, written out again
		h := float64(len(stays)-1) * p
		i := int(h)
		if i+1 >= len(stays) {
			return stays[len(stays)-1]
		}
		return stays[i] + (h-float64(i))*(stays[i+1]-stays[i])
	}

	// Through the schema reader and the accumulator.
	pb, err := os.ReadFile(dir + "profile.yaml")
	if err != nil {
		t.Fatal(err)
	}
	prof, err := schema.ParseProfile(pb)
	if err != nil {
		t.Fatal(err)
	}
	g, err := os.Open(dir + "sepsis-cases.csv.gz")
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	rd, err := schema.NewReader(g, prof, schema.ReaderOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var evs []schema.Event
	for {
		var e schema.Event
		rej, err := rd.Next(&e)
		if err == io.EOF {
			break
		}
		if err != nil || rej != nil {
			t.Fatal(err, rej)
		}
		evs = append(evs, e)
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	// Stays reach a year with gaps of months: each case is one stay whatever its idle times.
	acc := New(Options{Location: ams})
	acc.ObserveAll(evs)
	s := acc.Summary()
	l := s.LengthOfStay
	if l.N != uint64(len(spans)) || !l.Exact {
		t.Fatalf("stays %d exact %v, want %d", l.N, l.Exact, len(spans))
	}
	for _, c := range []struct{ p, got float64 }{{0.5, l.P50}, {0.9, l.P90}, {0.95, l.P95}, {0.99, l.P99}} {
		if want := q7(c.p); !relClose(c.got, want, 1e-12) {
			t.Errorf("stay p%v = %v, standard library %v", 100*c.p, c.got, want)
		}
	}
	// Published with the log (testdata/sepsis/README.md): 1050 traces, case
	// durations total 2.582720637E9 s, min 122 s, max 3.6488789E7 s.
	if l.N != 1050 || math.Abs(l.Mean*1050-2582720637) > 1e-3 || l.Min != 122 || l.Max != 36488789 {
		t.Errorf("stays n %d total %v min %v max %v, published 1050, 2582720637, 122, 36488789", l.N, l.Mean*1050, l.Min, l.Max)
	}
	for h, r := range s.Arrivals.HourOfDay {
		if r.Count != hours[h] {
			t.Errorf("arrivals at %02d h: %d, standard library %d", h, r.Count, hours[h])
		}
	}
	// Published: 15214 events, 16 activities, 26 org:group values.
	if s.Events != 15214 || len(s.Activities) != 16 || s.Resources.Value != 26 || s.Cases.Value != 1050 {
		t.Errorf("events %d activities %d resources %v cases %v", s.Events, len(s.Activities), s.Resources.Value, s.Cases.Value)
	}
	// A log of completions has no exits: every case stays in the census
	// to the log's end, so L·T = Σ (end − first) and λW·T = Σ (last −
	// first), and the law is not judged.
	var end time.Time
	for _, sp := range spans {
		if sp.last.After(end) {
			end = sp.last
		}
	}
	var census, seen float64
	var begin = end
	for _, sp := range spans {
		census += end.Sub(sp.first).Seconds()
		seen += sp.last.Sub(sp.first).Seconds()
		if sp.first.Before(begin) {
			begin = sp.first
		}
	}
	T := end.Sub(begin).Seconds()
	lw := s.Occupancy.Little
	if lw.Judged || lw.Exits != 0 || lw.Open != 1050 || !relClose(lw.L, census/T, 1e-12) || !relClose(lw.LambdaW, seen/T, 1e-12) {
		t.Errorf("Little %+v, standard library L %v λW %v (not judged)", lw, census/T, seen/T)
	}
	if !slices.ContainsFunc(s.NotMeasurable, func(n NotMeasurable) bool { return n.Figure == "littles_law" }) {
		t.Errorf("not measurable %+v lacks littles_law", s.NotMeasurable)
	}
	var total uint64
	for _, c := range s.LengthOfStay.Histogram.Counts {
		total += c
	}
	if total != 1050 || len(s.LengthOfStay.Histogram.Edges) != len(s.LengthOfStay.Histogram.Counts)+1 {
		t.Errorf("histogram %+v", s.LengthOfStay.Histogram)
	}
	// The text says what cannot be measured and prints no zeros for it: a
	// completion-only log has no service rows and no census figures.
	var b strings.Builder
	if err := s.Text(&b, false); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	for _, bad := range []string{"\nService\n", "Little: L (census)", "peak (bucket mean)", "littles_law"} {
		if strings.Contains(out, bad) {
			t.Errorf("text holds %q:\n%s", bad, out)
		}
	}
	for _, want := range []string{`Services\s+not measurable`, `Little's law\s+not measurable`, `In system\nnot measurable`} {
		if !regexp.MustCompile(want).MatchString(out) {
			t.Errorf("text lacks %q:\n%s", want, out)
		}
	}
}

func TestSelectionAndText(t *testing.T) {
	mu := 1.0 / 60
	acc := New(Options{})
	base := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
	observeCustomers(acc, base, "c", simulateMMc(5, 2000, 2, 1.6*mu, mu))
	e := schema.Event{Site: "other", CaseID: "x", Type: schema.Enqueue, Queue: "q2", Activity: "a2", OccurredAt: base.Add(time.Hour)}
	acc.ObserveAll([]schema.Event{e})
	s := acc.SummaryFor(Selection{Queues: []string{"q2"}, Sites: []string{"sim"}, Activities: []string{"none"}})
	if len(s.Queues) != 1 || s.Queues[0].Name != "q2" || len(s.Sites) != 1 || s.Sites[0].Name != "sim" || len(s.Activities) != 0 {
		t.Errorf("selection: %d queues, %d sites, %d activities", len(s.Queues), len(s.Sites), len(s.Activities))
	}
	full := acc.Summary()
	if len(full.Queues) != 2 || len(full.Sites) != 2 || full.Events != s.Events {
		t.Errorf("full: %d queues %d sites", len(full.Queues), len(full.Sites))
	}
	for _, color := range []bool{false, true} {
		var b strings.Builder
		if err := full.Text(&b, color); err != nil {
			t.Fatal(err)
		}
		out := b.String()
		if strings.Contains(out, "\x1b[") != color || !strings.ContainsAny(out, "▁█") || !strings.Contains(out, "Little") {
			t.Errorf("color %v:\n%s", color, out)
		}
		if !color {
			t.Logf("\n%s", out)
		}
	}
	// JSON carries no NaN: it encodes.
	if _, err := json.Marshal(full); err != nil {
		t.Fatal(err)
	}
}
