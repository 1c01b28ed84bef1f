package export

import (
	"context"
	"errors"
	"os"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

func TestFilterValidate(t *testing.T) {
	t0 := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	for _, tc := range []struct {
		name string
		f    Filter
		want string // substring of the error; "" for none
	}{
		{"zero", Filter{}, ""},
		{"window", Filter{From: t0, To: t0.Add(time.Hour)}, ""},
		{"open from", Filter{To: t0}, ""},
		{"equal", Filter{From: t0, To: t0}, "is not before"},
		{"reversed", Filter{From: t0.Add(time.Hour), To: t0}, "is not before"},
		{"columns", Filter{Columns: []schema.Field{"occurred_at", "site"}}, ""},
		{"bad column", Filter{Columns: []schema.Field{"site", "patient_name"}}, `unknown column "patient_name"; valid columns are site, case_id`},
		{"types", Filter{EventTypes: []schema.EventType{"arrival"}}, ""},
		{"bad type", Filter{EventTypes: []schema.EventType{"teleport"}}, `unknown event type "teleport"`},
	} {
		t.Run(tc.name, func(t *testing.T) {
			err := tc.f.Validate()
			if tc.want == "" {
				if err != nil {
					t.Fatalf("Validate: %v", err)
				}
				return
			}
			if err == nil || !errors.Is(err, ErrBadFilter) || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("Validate = %v, want %q wrapping ErrBadFilter", err, tc.want)
			}
		})
	}
	// Events refuses a bad filter before reading anything.
	if _, err := Events(context.Background(), Source{}, nil, Filter{Columns: []schema.Field{"x"}}, nil); !errors.Is(err, ErrBadFilter) {
		t.Errorf("Events with a bad filter: %v", err)
	}
}

func TestEventsOrderMatchesGoSort(t *testing.T) {
	e, vs := fixture(t, 100)
	files := vs[2].Manifest.Files
	all := e.allEvents(t, files)
	if len(all) != 2700 {
		t.Fatalf("fixture has %d events", len(all))
	}
	ties := 0
	for _, tc := range []struct {
		name string
		f    Filter
		skip bool // row groups must be skipped
	}{
		{"all", Filter{}, false},
		{"narrow window", Filter{From: genBase.Add(time.Hour), To: genBase.Add(2 * time.Hour)}, true},
		{"window across files", Filter{From: genBase.Add(20 * time.Hour), To: genBase.Add(30 * time.Hour)}, true},
		{"sites", Filter{Sites: []string{"north", "east"}}, false},
		{"types and queues", Filter{EventTypes: []schema.EventType{schema.Abandon}, Queues: []string{"q2", ""}}, false},
		{"no activity", Filter{Activities: []string{""}}, false},
		{"nothing", Filter{Sites: []string{"west"}}, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			want := sorted(all, tc.f)
			got, st := collect(t, e, files, tc.f)
			if len(got) != len(want) {
				t.Fatalf("got %d events, want %d (stats %+v)", len(got), len(want), st)
			}
			for i := range got {
				if !reflect.DeepEqual(got[i], want[i]) {
					t.Fatalf("event %d = %+v, want %+v", i, got[i], want[i])
				}
				if i > 0 && got[i].OccurredAt.Equal(got[i-1].OccurredAt) {
					ties++
				}
			}
			if st.RowsEmitted != int64(len(want)) || st.Files != 3 || st.RowGroups != st.RowGroupsRead+st.RowGroupsSkipped {
				t.Errorf("stats %+v", st)
			}
			if tc.skip && st.RowGroupsSkipped+st.FilesSkipped == 0 {
				t.Errorf("nothing skipped for %s: %+v", tc.name, st)
			}
			if tc.name == "narrow window" && (st.FilesSkipped != 2 || st.RowsRead >= 900 || st.BytesRead == 0) {
				t.Errorf("a one-hour window of day 1 read too much: %+v", st)
			}
			if tc.name == "all" && (st.RowsRead != 2700 || st.RowGroupsSkipped != 0 || st.RowGroups != 27) {
				t.Errorf("full scan stats %+v", st)
			}
			// A second pass gives the same order.
			again, _ := collect(t, e, files, tc.f)
			if !reflect.DeepEqual(got, again) {
				t.Error("two passes differ")
			}
		})
	}
	if ties == 0 {
		t.Error("the fixture has no equal instants; the content order is not exercised")
	}
}

func TestEventsFileOrderDoesNotMatter(t *testing.T) {
	e, vs := fixture(t, 100)
	files := vs[2].Manifest.Files
	rev := []catalog.FileEntry{files[2], files[0], files[1]}
	a, _ := collect(t, e, files, Filter{})
	b, _ := collect(t, e, rev, Filter{})
	if !reflect.DeepEqual(a, b) {
		t.Error("the order depends on the order of the manifest's files")
	}
}

func TestEventsStaged(t *testing.T) {
	e, vs := fixture(t, 100)
	files := vs[2].Manifest.Files
	direct, _ := collect(t, e, files, Filter{})
	defer func(n int) { maxOpen = n }(maxOpen)
	maxOpen = 2
	for _, f := range []Filter{{}, {Sites: []string{"south"}, EventTypes: []schema.EventType{schema.Start, schema.Complete}}} {
		staged, st := collect(t, e, files, f)
		want := sorted(direct, f)
		if st.Stages != 1 || !reflect.DeepEqual(staged, want) {
			t.Errorf("staged merge (%d stages) gave %d events, want %d equal to the direct merge", st.Stages, len(staged), len(want))
		}
	}
	// The stage files go to the source's temp dir, and are gone afterwards.
	seen := 0
	_, err := Events(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, files, Filter{}, func(*schema.Event) error {
		if seen == 0 {
			ents, _ := os.ReadDir(e.tmp)
			seen = len(ents)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if ents, _ := os.ReadDir(e.tmp); seen == 0 || len(ents) != 0 {
		t.Errorf("stage files in the temp dir: %d during the merge, %d after; want some, then none", seen, len(ents))
	}
}

func TestEventsStopsOnCallbackError(t *testing.T) {
	e, vs := fixture(t, 100)
	stop := errors.New("stop")
	n := 0
	_, err := Events(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, vs[2].Manifest.Files, Filter{}, func(*schema.Event) error {
		n++
		if n == 10 {
			return stop
		}
		return nil
	})
	if !errors.Is(err, stop) || n != 10 {
		t.Errorf("err %v after %d events", err, n)
	}
}
