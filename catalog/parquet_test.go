package catalog

import (
	"bytes"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestEventWriterSchema checks that the schema EventWriter builds from
// the field table for every column is schema.Event's Parquet schema (what
// readers reconstruct events through), and that a writer handed that
// schema and one building its own give the same bytes for events whose
// optional fields are empty in runs and alternations (the byte-for-byte
// check against the writers of before is TestParquetBytesUnchanged).
func TestEventWriterSchema(t *testing.T) {
	strip := func(s string) string { _, rest, _ := strings.Cut(s, "{"); return rest }
	got, want := strip(eventSchemaOf(schema.Fields, nil).String()), strip(parquet.SchemaOf(schema.Event{}).String())
	if got != want {
		t.Fatalf("the writer's schema\n%s\nschema.Event's\n%s", got, want)
	}
	r := rand.New(rand.NewPCG(3, 3))
	base := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	evs := make([]schema.Event, 5000)
	opt := func(i int, v string) string {
		if (i/7)%2 == 0 || r.IntN(3) == 0 {
			return ""
		}
		return v
	}
	for i := range evs {
		evs[i] = schema.Event{Site: "north", CaseID: "c" + string(rune('a'+i%20)), SubjectID: opt(i, "s"), ResourceID: opt(i+3, "r"),
			Type: schema.Arrival, Activity: opt(i+1, "triage"), Queue: opt(i+2, "q"), OccurredAt: base.Add(time.Duration(i) * time.Second),
			Priority: opt(i+5, "1"), Channel: opt(i+4, "phone"), Outcome: opt(i+6, "seen"), EventID: opt(i, "e")}
	}
	// One by one through Write, or in slices of uneven lengths through
	// WriteEvents (whole batches straight from the slice): the same bytes.
	write := func(cut []int) []byte {
		var buf bytes.Buffer
		w := NewEventWriter(&buf, schema.Fields, EventWriterOptions{RowGroupRows: 1000})
		rest := evs
		for k := 0; len(rest) > 0; k++ {
			if len(cut) == 0 {
				e := rest[0]
				if err := w.Write(&e); err != nil {
					t.Fatal(err)
				}
				e = schema.Event{} // the writer must have copied what it keeps
				rest = rest[1:]
				continue
			}
			n := min(cut[k%len(cut)], len(rest))
			batch := slices.Clone(rest[:n])
			if err := w.WriteEvents(batch); err != nil {
				t.Fatal(err)
			}
			clear(batch) // the writer must have copied what it keeps
			rest = rest[n:]
		}
		if err := w.Close(); err != nil {
			t.Fatal(err)
		}
		return buf.Bytes()
	}
	one := write(nil)
	for _, cut := range [][]int{{1024}, {700, 1, 512, 3000, 64}, {511}} {
		if got := write(cut); !bytes.Equal(got, one) {
			t.Errorf("written in slices of %v: %d bytes, one by one %d", cut, len(got), len(one))
		}
	}
}
