package quality

import (
	"encoding/json"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// farFile is 100 arrivals an hour apart from 1 March 2024 and, when far,
// one more on 9999-12-31.
func farFile(far bool) []schema.Event {
	var evs []schema.Event
	t := time.Date(2024, 3, 1, 0, 0, 0, 0, time.UTC)
	for i := range 100 {
		evs = append(evs, schema.Event{Site: "north", CaseID: "c" + string(rune('a'+i%26)) + time.Duration(i).String(), Type: schema.Arrival, OccurredAt: t.Add(time.Duration(i) * time.Hour), Line: int64(i + 2)})
	}
	if far {
		evs = append(evs, schema.Event{Site: "north", CaseID: "far", Type: schema.Arrival, OccurredAt: time.Date(9999, 12, 31, 12, 0, 0, 0, time.UTC), Line: 102})
	}
	return evs
}

func heldHours(r *Report) int {
	n := 0
	for _, s := range r.Raw.Sites {
		for _, run := range s.Hours.Runs {
			n += len(run.Counts)
		}
	}
	return n
}

// TestFarInstantBounded: one event dated 9999-12-31 among 100 of March
// 2024 is a far_instant finding, and the hourly state (per file and merged
// over files) holds the hours near events, not the 70 million hours
// between.
func TestFarInstantBounded(t *testing.T) {
	opt := Options{UploadedAt: time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)}
	clean := run(opt, farFile(false), nil, nil)
	far := run(opt, farFile(true), nil, nil)
	if got := far.Count(CodeFarInstant); got != 1 {
		t.Errorf("far_instant %d, want 1", got)
	}
	if got := clean.Count(CodeFarInstant); got != 0 {
		t.Errorf("clean file: far_instant %d, want 0", got)
	}
	if h := heldHours(far); h != 100+1 {
		t.Errorf("far file holds %d hours, want 101 (100 + the far one)", h)
	}
	m, err := MergeReports(clean, far, clean)
	if err != nil {
		t.Fatal(err)
	}
	if h := heldHours(m); h != 101 {
		t.Errorf("merged report holds %d hours, want 101", h)
	}
	b, _ := json.Marshal(m)
	if len(b) > 64<<10 {
		t.Errorf("merged report is %d bytes of JSON", len(b))
	}
	// The gap rule judges the same hours with or without the far event.
	if c, f := clean.Currentness[0].JudgedHours, far.Currentness[0].JudgedHours; c != f {
		t.Errorf("judged hours %d without the far event, %d with", c, f)
	}
}

// TestHourSeriesFormat2 reads the dense series of report format 2 as runs.
func TestHourSeriesFormat2(t *testing.T) {
	var h HourSeries
	// Two events 40 days apart (more than RunGapHours) and one an hour
	// after the first.
	counts := make([]int64, 40*24+1)
	counts[0], counts[1], counts[40*24] = 2, 1, 3
	old, _ := json.Marshal(map[string]any{"start": "2024-03-01T00:00:00Z", "counts": counts, "beyond": 4})
	if err := json.Unmarshal(old, &h); err != nil {
		t.Fatal(err)
	}
	if len(h.Runs) != 2 || len(h.Runs[0].Counts) != 2 || h.Runs[1].Counts[0] != 3 || h.Beyond != 4 ||
		!h.Runs[1].Start.Equal(time.Date(2024, 4, 10, 0, 0, 0, 0, time.UTC)) {
		t.Errorf("runs %+v beyond %d", h.Runs, h.Beyond)
	}
}
