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

// TestCopiesDropped: an accumulator told that the caller drops exact
// copies (Options.CopiesDropped, as an upload's held-event filter does)
// reports, on a stream without copies, exactly what one that looks for
// them reports. The streams are the two real logs of testdata (sepsis and
// patients, their provenance in each folder's README), their copies
// removed by a key of every field built here with the standard library;
// the same stream with one event sent twice shows that the check finds a
// copy when it looks.
func TestCopiesDropped(t *testing.T) {
	for _, log := range []struct{ dir, file string }{
		{sepsisDir, "sepsis-cases.csv.gz"},
		{"../testdata/patients", "patients.csv.gz"},
	} {
		t.Run(filepath.Base(log.dir), func(t *testing.T) { copiesDropped(t, log.dir, log.file) })
	}
}

func copiesDropped(t *testing.T, dir, file string) {
	prof, all := readLog(t, dir, file)
	var evs []schema.Event
	seen := map[string]bool{}
	copies := 0
	for _, e := range all {
		k := e
		k.Line, k.Row = 0, 0 // the source line is not a field
		key := fmt.Sprintf("%#v", k)
		if seen[key] {
			copies++
			continue
		}
		seen[key] = true
		evs = append(evs, e)
	}
	if len(evs) < 1000 {
		t.Fatalf("read %d events of %s", len(evs), file)
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
	opt := Options{Zone: prof.Location(), UploadedAt: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)}
	report := func(opt Options, evs []schema.Event) *Report {
		a := NewAccumulator(opt)
		for i := range evs {
			a.Observe(&evs[i])
		}
		return a.Report()
	}
	looking := report(opt, evs)
	dropped := opt
	dropped.CopiesDropped = true
	trusting := report(dropped, evs)
	lj, _ := json.Marshal(looking)
	tj, _ := json.Marshal(trusting)
	if !bytes.Equal(lj, tj) {
		t.Errorf("reports differ on a stream without copies (%d removed from the log):\n%s\n%s", copies, lj, tj)
	}
	if n := looking.Count(CodeExactDuplicate); n != 0 {
		t.Errorf("%d exact duplicates found in a stream without copies", n)
	}
	i := len(evs) / 2
	twice := slices.Insert(slices.Clone(evs), i+1, evs[i])
	if n := report(opt, twice).Count(CodeExactDuplicate); n != 1 {
		t.Errorf("one event sent twice: %d exact duplicates, want 1", n)
	}
}
