package quality

import (
	"bytes"
	"encoding/json"
	"fmt"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestEndTimePass: freeing the event-id table between the time pass and
// the per-case pass (what an upload does before its commit) changes
// the report, and leaves the table at its
// least size. The streams are the two real logs of testdata (sepsis and
// patients, provenance in each folder's README) and a generated one of
// event ids reused within the window; a bounded table keeps its
// event_id_bound in the report.
func TestEndTimePass(t *testing.T) {
	type stream struct {
		name string
		opt  Options
		evs  []schema.Event
	}
	var streams []stream
	for _, log := range []struct{ dir, file string }{
		{sepsisDir, "sepsis-cases.csv.gz"},
		{"../testdata/patients", "patients.csv.gz"},
	} {
		prof, evs := readLog(t, log.dir, log.file)
		slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
		streams = append(streams, stream{filepath.Base(log.dir), Options{Zone: prof.Location(), UploadedAt: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)}, evs})
	}
	var ids []schema.Event
	at := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	for i := range 20000 {
		ids = append(ids, schema.Event{Site: "north", CaseID: fmt.Sprintf("c%d", i/4), Type: schema.Arrival,
			OccurredAt: at.Add(time.Duration(i) * time.Second), EventID: fmt.Sprintf("e%d", i%15000), Line: int64(i + 2)})
	}
	streams = append(streams, stream{"ids", Options{}, ids})

	for _, s := range streams {
		whole := NewAccumulator(s.opt)
		whole.ObserveSorted(slices.Clone(s.evs))
		freed := NewAccumulator(s.opt)
		evs := slices.Clone(s.evs)
		flags := make([]Flags, len(evs))
		for i := range evs {
			flags[i] = freed.Observe(&evs[i])
		}
		freed.EndTimePass()
		slots := 0
		for i := range freed.ids.shards {
			slots += len(freed.ids.shards[i].slots)
		}
		if slots != tableShards*minShardSize || freed.ids.n != 0 {
			t.Errorf("%s: %d slots, %d records after EndTimePass", s.name, slots, freed.ids.n)
		}
		freed.observeCases(evs, flags)
		r1, _ := json.Marshal(whole.Report())
		r2, _ := json.Marshal(freed.Report())
		if !bytes.Equal(r1, r2) {
			t.Errorf("%s: the report differs once the time pass's ids are freed:\n%s\n%s", s.name, r1, r2)
		}
		if s.name == "ids" && !bytes.Contains(r1, []byte(`"duplicate_event_id"`)) {
			t.Errorf("ids: no duplicate event ids found: %s", r1)
		}
	}
	// A bounded table: the bound it reported stays in the report.
	a := NewAccumulator(Options{MaxEventIDSlots: 4096})
	for i := range ids {
		a.Observe(&ids[i])
	}
	before := a.Report().Raw.Settings.EventIDBound
	a.EndTimePass()
	if after := a.Report().Raw.Settings.EventIDBound; before == nil || after == nil || *before != *after {
		t.Errorf("event_id_bound %+v before EndTimePass, %+v after", before, after)
	}
}
