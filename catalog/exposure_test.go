package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/summary"
)

// partnerExport writes a partner-style export: wall-clock times in
// America/Halifax without an offset, across the spring clock change of
// 2026-03-08 (02:00 local does not exist), starting and ending mid-day,
// with cases dated after the upload and rows sent twice.
func partnerExport(t *testing.T) (csv []byte, loc *time.Location, future, copies int) {
	loc, err := time.LoadLocation("America/Halifax")
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	b.WriteString("ref,kind,stamp\n")
	row := func(ref, kind string, at time.Time) string {
		return fmt.Sprintf("%s,%s,%s\n", ref, kind, at.In(loc).Format("2006-01-02 15:04:05"))
	}
	at := time.Date(2026, 3, 6, 13, 20, 0, 0, loc)
	end := time.Date(2026, 3, 9, 9, 40, 0, 0, loc)
	x := uint64(12345)
	for i := 0; at.Before(end); i++ {
		x = x*6364136223846793005 + 1442695040888963407 // a fixed LCG: the fixture is the same every run
		at = at.Add(time.Duration(5+x>>59) * time.Minute)
		ref := fmt.Sprintf("V%05d", i)
		rows := []string{row(ref, "arrival", at), row(ref, "start", at.Add(4*time.Minute)),
			row(ref, "complete", at.Add(19*time.Minute)), row(ref, "departure", at.Add(23*time.Minute))}
		for _, r := range rows {
			b.WriteString(r)
		}
		if i%37 == 0 { // sent twice
			b.WriteString(rows[2])
			copies++
		}
	}
	for i := range 5 { // dated after the upload (testNow is 2026-06-01)
		at := time.Date(2026, 7, 1+i, 10, 0, 0, 0, loc)
		b.WriteString(row(fmt.Sprintf("F%d", i), "arrival", at))
		b.WriteString(row(fmt.Sprintf("F%d", i), "departure", at.Add(time.Hour)))
		future += 2
	}
	return b.Bytes(), loc, future, copies
}

// TestExposureAcrossClockChange: hourly arrival rates divide by the hours
// actually observed in the dataset's zone (the skipped hour of the clock
// change is no exposure, the partial first and last days count their
// hours), events later than the upload stay out, and the rates equal an
// independent computation with time.LoadLocation, exactly.
func TestExposureAcrossClockChange(t *testing.T) {
	e := newEnv(t, nil)
	data, loc, future, copies := partnerExport(t)
	prof := []byte(`format: csv
timezone: America/Halifax
fields:
  site: {value: "harbour"}
  case_id: ref
  event_type: kind
  occurred_at: {column: stamp, layout: "%Y-%m-%d %H:%M:%S"}
`)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = prof })
	e.ingest(t, "p", "d", data, "export.csv")
	js, err := e.s.Summary(context.Background(), "p/d", 1)
	if err != nil {
		t.Fatal(err)
	}
	var s summary.Summary
	if err := json.Unmarshal(js, &s); err != nil {
		t.Fatal(err)
	}

	// Independently: each case's first instant (the summary's arrival),
	// from the rows not dated after the upload; exposure from the real
	// hours between the first and last such row.
	first := map[string]time.Time{}
	var lo, hi time.Time
	for _, line := range bytes.Split(bytes.TrimSpace(data), []byte("\n"))[1:] {
		var ref, kind, day, clock string
		if _, err := fmt.Sscanf(string(bytes.ReplaceAll(line, []byte(","), []byte(" "))), "%s %s %s %s", &ref, &kind, &day, &clock); err != nil {
			t.Fatal(err)
		}
		at, err := time.ParseInLocation("2006-01-02 15:04:05", day+" "+clock, loc)
		if err != nil {
			t.Fatal(err)
		}
		if at.After(testNow) {
			continue
		}
		if f, ok := first[ref]; !ok || at.Before(f) {
			first[ref] = at
		}
		if lo.IsZero() || at.Before(lo) {
			lo = at
		}
		if at.After(hi) {
			hi = at
		}
	}
	var count [24]uint64
	var hours [24]int
	for _, f := range first {
		count[f.In(loc).Hour()]++
	}
	total := 0
	for u := lo.Truncate(time.Hour); !u.After(hi); u = u.Add(time.Hour) {
		hours[u.In(loc).Hour()]++
		total++
	}
	if hours[2] != 2 || hours[3] != 3 {
		t.Fatalf("fixture: local 02 h observed %d times (want 2: Mar 7 and 9, skipped on Mar 8), 03 h %d", hours[2], hours[3])
	}
	if s.ExposureHours != total {
		t.Errorf("exposure %d hours, standard library %d", s.ExposureHours, total)
	}
	for h := range 24 {
		r := s.Arrivals.HourOfDay[h]
		want := float64(count[h]) / float64(hours[h])
		if r.Count != count[h] || r.Hours != hours[h] || r.Mean != want {
			t.Errorf("%02d h: %d arrivals over %d hours = %v, standard library %d over %d = %v", h, r.Count, r.Hours, r.Mean, count[h], hours[h], want)
		}
	}
	if s.Excluded.LaterThanUpload != uint64(future) || s.To.After(testNow) {
		t.Errorf("left out %+v, to %v; want %d later than the upload", s.Excluded, s.To, future)
	}
	if s.Cases.Value != float64(len(first)) {
		t.Errorf("cases %v, standard library %d (cases dated after the upload left out)", s.Cases.Value, len(first))
	}
	// The version's process views come from the same per-case pass: every
	// kept case follows arrival > start > complete > departure, activities
	// unnamed, so one empty variant holds every case.
	if pv := s.Process; pv == nil || len(pv.Variants) != 1 || pv.Variants[0].Cases != uint64(len(first)) || len(pv.DirectlyFollows) != 0 {
		t.Errorf("process views %+v", s.Process)
	}
	t.Logf("exposure %d hours, %d copies sent, %d exact copies left out", s.ExposureHours, copies, s.Excluded.ExactDuplicates)
}

// TestSamplesNameTheirFile: a version made of two uploads reports where
// each sample is as file and line.
func TestSamplesNameTheirFile(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	a := "site,case_id,event_type,occurred_at\n" +
		"s,c1,arrival,2026-05-01T10:00:00Z\n" +
		"s,c2,arrival,2026-07-01T10:00:00Z\n" // dated after the upload (testNow)
	b := "site,case_id,event_type,occurred_at\n" +
		"s,c3,arrival,2026-08-01T10:00:00Z\n" +
		"s,c4,arrival,2026-05-02T10:00:00Z\n"
	e.ingest(t, "p", "d", []byte(a), "monday.csv")
	res := e.ingest(t, "p", "d", []byte(b), "tuesday.csv")
	q := e.report(t, res.Version)
	var got []string
	for _, f := range q.Findings() {
		if f.Code == "later_than_upload" {
			for _, s := range f.Samples {
				got = append(got, fmt.Sprintf("%s:%d", s.File, s.Line))
			}
		}
	}
	if want := []string{"monday.csv:3", "tuesday.csv:2"}; fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("samples %v, want %v", got, want)
	}
}

// TestTerminalFromProfile: a profile that declares complete terminal
// takes calls out of the census at their complete, in the version's
// report and in its summary.
func TestTerminalFromProfile(t *testing.T) {
	e := newEnv(t, nil)
	prof := []byte("terminal: [complete]\nfields:\n  site: {value: line}\n  case_id: c\n  event_type: t\n  occurred_at: at\n")
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = prof })
	var b bytes.Buffer
	b.WriteString("c,t,at\n")
	base := time.Date(2026, 5, 4, 0, 0, 0, 0, time.UTC)
	for i := range 200 {
		at := base.Add(time.Duration(i) * 17 * time.Minute)
		fmt.Fprintf(&b, "k%d,arrival,%s\nk%d,complete,%s\n", i, at.Format(time.RFC3339), i, at.Add(9*time.Minute).Format(time.RFC3339))
	}
	res := e.ingest(t, "p", "d", b.Bytes(), "calls.csv")
	l := e.report(t, res.Version).Little[0]
	if !l.Judged || l.Flagged || l.Exits != 200 || math.Abs(l.Ratio-1) > 0.02 {
		t.Errorf("report: %+v", l)
	}
	js, err := e.s.Summary(context.Background(), "p/d", 1)
	if err != nil {
		t.Fatal(err)
	}
	var s summary.Summary
	if err := json.Unmarshal(js, &s); err != nil {
		t.Fatal(err)
	}
	if sl := s.Occupancy.Little; !sl.Judged || sl.Exits != 200 || sl.Open != 0 || math.Abs(sl.Ratio-1) > 1e-9 {
		t.Errorf("summary: %+v", sl)
	}
}
