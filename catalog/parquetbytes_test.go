package catalog

import (
	"bytes"
	"flag"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

var writeParquetBytes = flag.Bool("write-parquet-bytes", false, "rewrite testdata/parquetbytes from this build (only on a commit whose writers are the reference)")

// TestParquetBytesUnchanged writes every kind of Parquet file flowcat
// stores or serves (a snapshot of every column over many row groups and
// pages, a snapshot with event attribute columns, an export of a column
// subset with attributes, a case table, a case attribute table) from fixed
// invented inputs, and compares each file byte for byte with the one the
// writers of main at 20d3504 wrote from the same inputs
// (testdata/parquetbytes/README.md). Stored bytes are the identity of a
// snapshot: a change to the writers must not change them.
func TestParquetBytesUnchanged(t *testing.T) {
	for _, fx := range parquetByteFixtures(t) {
		t.Run(fx.name, func(t *testing.T) {
			got := fx.write(t)
			path := filepath.Join("testdata", "parquetbytes", fx.name+".parquet")
			if *writeParquetBytes {
				if err := os.WriteFile(path, got, 0o644); err != nil {
					t.Fatal(err)
				}
				return
			}
			want, err := os.ReadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			if !bytes.Equal(got, want) {
				at := 0
				for at < len(got) && at < len(want) && got[at] == want[at] {
					at++
				}
				t.Errorf("%s: %d bytes, want %d; first difference at byte %d", fx.name, len(got), len(want), at)
			}
		})
	}
}

type parquetByteFixture struct {
	name  string
	write func(t *testing.T) []byte
}

// fixtureEvents are n invented events in occurred_at order: optional
// fields empty in runs, alternations and at random (the shapes that
// catch a writer storing "" for NULL), many distinct cases, and event ids
// long enough that a column chunk spans several pages.
func fixtureEvents(n int, seed uint64) []schema.Event {
	r := rand.New(rand.NewPCG(seed, seed+1))
	t0 := time.Date(2026, 2, 27, 6, 30, 0, 0, time.UTC)
	types := []schema.EventType{schema.Arrival, schema.Enqueue, schema.Start, schema.Complete, schema.Abandon, schema.Transfer, schema.Departure}
	opt := func(i, period int, v string) string {
		switch {
		case (i/period)%2 == 0:
			return ""
		case r.IntN(4) == 0:
			return ""
		}
		return v
	}
	evs := make([]schema.Event, n)
	at := t0
	for i := range evs {
		at = at.Add(time.Duration(r.IntN(90_000_000)) * time.Microsecond)
		c := r.IntN(n/4 + 1)
		evs[i] = schema.Event{
			Site:       []string{"north", "south", "harbour"}[c%3],
			CaseID:     fmt.Sprintf("case-%06d", c),
			SubjectID:  opt(i, 5, fmt.Sprintf("subj-%05d", c/2)),
			ResourceID: opt(i, 3, fmt.Sprintf("desk-%d", r.IntN(12))),
			Type:       types[r.IntN(len(types))],
			Activity:   opt(i, 11, []string{"triage", "assess", "x-ray", "billing"}[r.IntN(4)]),
			Queue:      opt(i, 64, []string{"front", "back"}[r.IntN(2)]),
			OccurredAt: at,
			Priority:   opt(i, 1, fmt.Sprint(r.IntN(5))),
			Channel:    opt(i, 7, []string{"walk-in", "phone", "referral"}[r.IntN(3)]),
			Outcome:    opt(i, 13, []string{"seen", "left", "moved"}[r.IntN(3)]),
			EventID:    opt(i, 2, fmt.Sprintf("evt-%08d-%s", i, strings.Repeat("q", 300))),
			InstanceID: opt(i, 9, fmt.Sprintf("inst-%d", r.IntN(n))),
		}
	}
	// Instants outside int64 nanoseconds (1677-2262) at both ends.
	evs[0].OccurredAt = time.Date(1, 1, 1, 0, 0, 0, 1000, time.UTC)
	evs[n-1].OccurredAt = time.Date(9999, 12, 31, 23, 59, 59, 999999000, time.UTC)
	return evs
}

// fixtureAttrs gives each event values of a code, an integer and a date
// attribute, some NULL.
func fixtureAttrs(evs []schema.Event, seed uint64) []AttributeColumn {
	r := rand.New(rand.NewPCG(seed, 7))
	for i := range evs {
		vals := []string{"", "", ""}
		if r.IntN(3) > 0 {
			vals[0] = []string{"A1", "B2", "C3", "D"}[r.IntN(4)]
		}
		if r.IntN(4) > 0 {
			vals[1] = fmt.Sprint(r.IntN(400) - 20)
		}
		if i%5 != 0 {
			vals[2] = time.Date(2026, 1, 1+r.IntN(90), 0, 0, 0, 0, time.UTC).Format(time.DateOnly)
		}
		evs[i].Attrs = schema.JoinAttrs(vals)
	}
	return []AttributeColumn{
		{Name: "acuity", Type: schema.TypeCode, Role: schema.RoleSensitive, Rule: "kept"},
		{Name: "bed", Type: schema.TypeInteger, Role: schema.RolePlain, Rule: "kept"},
		{Name: "seen_on", Type: schema.TypeDate, Role: schema.RolePlain, Rule: "week"},
	}
}

func writeSnapshotFixture(t *testing.T, sw *snapshotWriter, err error, evs []schema.Event) []byte {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
	defer sw.Remove()
	for i := range evs {
		if err := sw.Write(&evs[i]); err != nil {
			t.Fatal(err)
		}
	}
	return finishedBytes(t, sw.tempTable, func() error { _, _, err := sw.Finish(); return err })
}

// finishedBytes finishes a stored table's writer and returns its file.
func finishedBytes(t *testing.T, tt *tempTable, finish func() error) []byte {
	t.Helper()
	if err := finish(); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(tt.f.Name())
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func parquetByteFixtures(t *testing.T) []parquetByteFixture {
	return []parquetByteFixture{
		{"snapshot-every", func(t *testing.T) []byte {
			evs := fixtureEvents(12000, 1)
			sw, err := newSnapshotWriter(t.TempDir(), 5000, "k-fixture", "0123abcd")
			return writeSnapshotFixture(t, sw, err, evs)
		}},
		{"snapshot-attrs", func(t *testing.T) []byte {
			evs := fixtureEvents(3000, 2)
			attrs := fixtureAttrs(evs, 2)
			ac := AttributeColumns(attrs)
			sw, err := newAttrSnapshotWriter(t.TempDir(), 1100, "k-fixture", &ac)
			return writeSnapshotFixture(t, sw, err, evs)
		}},
		{"export-subset", func(t *testing.T) []byte {
			evs := fixtureEvents(3000, 3)
			attrs := fixtureAttrs(evs, 3)
			cols := []schema.Field{schema.FieldCaseID, schema.FieldEventType, schema.FieldOccurredAt, schema.FieldActivity, schema.FieldEventID}
			var buf bytes.Buffer
			w := NewEventWriter(&buf, cols, EventWriterOptions{RowGroupRows: 1000, Attrs: attrs,
				Metadata: []KeyValue{{"flowcat.dataset", "p/d"}, {"flowcat.filter", "site=north"}}})
			for i := range evs {
				if err := w.Write(&evs[i]); err != nil {
					t.Fatal(err)
				}
			}
			if err := w.Close(); err != nil {
				t.Fatal(err)
			}
			return buf.Bytes()
		}},
		{"cases", func(t *testing.T) []byte {
			cw, err := newCaseTableWriter(t.TempDir(), 1500, "k-fixture")
			if err != nil {
				t.Fatal(err)
			}
			defer cw.Remove()
			r := rand.New(rand.NewPCG(4, 4))
			t0 := time.Date(2026, 2, 27, 6, 30, 0, 0, time.UTC)
			for i := range 4000 {
				first := t0.Add(time.Duration(i) * time.Minute)
				row := cases.Row{CaseID: fmt.Sprintf("case-%06d", i), Site: []string{"north", "south"}[i%2], Sites: int32(1 + i%2),
					FirstAt: first, LastAt: first.Add(time.Hour), Events: int64(2 + i%5), DurationSeconds: 3600,
					Outcome: []string{"served", "abandoned", "open"}[r.IntN(3)], Activities: int32(r.IntN(4)), Variant: fmt.Sprintf("%016x", r.Uint64()%64)}
				if i%3 != 0 {
					s := fmt.Sprintf("subj-%05d", i/2)
					row.SubjectID = &s
				}
				if i%4 != 1 {
					a := first.Add(time.Minute)
					row.ArrivalAt = &a
					w := float64(r.IntN(900))
					row.WaitSeconds = &w
				}
				if (i/64)%2 == 0 {
					s, e := first.Add(5*time.Minute), first.Add(time.Hour)
					row.StartAt, row.EndAt = &s, &e
					v := float64(r.IntN(3000))
					row.ServiceSeconds, row.StaySeconds = &v, &v
				}
				cw.add(&row)
			}
			return finishedBytes(t, cw.tempTable, func() error { _, err := cw.Finish(); return err })
		}},
		{"case-attributes", func(t *testing.T) []byte {
			attrs := []schema.Attribute{
				{Name: "sex", Type: schema.TypeCode, Role: schema.RoleQuasi},
				{Name: "age", Type: schema.TypeAge, Role: schema.RoleQuasi},
				{Name: "beds", Type: schema.TypeInteger, Role: schema.RolePlain},
				{Name: "admitted_on", Type: schema.TypeDate, Role: schema.RolePlain},
			}
			tw, err := newAttrTableWriter(t.TempDir(), 900, "k-fixture", attrs)
			if err != nil {
				t.Fatal(err)
			}
			defer tw.remove()
			r := rand.New(rand.NewPCG(5, 5))
			for i := range 2500 {
				vals := []string{[]string{"F", "M", ""}[r.IntN(3)], []string{"30-39", "90+", ""}[r.IntN(3)], "", ""}
				if i%3 > 0 {
					vals[2] = fmt.Sprint(r.IntN(40))
				}
				if i%7 > 0 {
					vals[3] = time.Date(2025, 12, 1+r.IntN(60), 0, 0, 0, 0, time.UTC).Format(time.DateOnly)
				}
				if err := tw.write(fmt.Sprintf("case-%06d", i), vals); err != nil {
					t.Fatal(err)
				}
			}
			return finishedBytes(t, tw.tempTable, func() error { _, err := tw.finish(); return err })
		}},
	}
}
