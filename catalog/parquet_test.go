package catalog

import (
	"bytes"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestStoredEventSchema checks that the writer's struct of every column
// has schema.Event's Parquet schema, and that the two ways EventWriter
// writes (that struct, or rows with their own levels) give the same bytes
// for events whose optional fields are empty in runs and alternations.
func TestStoredEventSchema(t *testing.T) {
	strip := func(s string) string { _, rest, _ := strings.Cut(s, "{"); return rest }
	got, want := strip(parquet.SchemaOf(storedEvent{}).String()), strip(subsetSchema(schema.Fields).String())
	if got != want {
		t.Fatalf("storedEvent schema\n%s\nschema.Event's\n%s", got, want)
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
	write := func(o EventWriterOptions) []byte {
		var buf bytes.Buffer
		w := NewEventWriter(&buf, schema.Fields, o)
		for i := range evs {
			e := evs[i]
			if err := w.Write(&e); err != nil {
				t.Fatal(err)
			}
			e = schema.Event{} // the writer must have copied what it keeps
		}
		if err := w.Close(); err != nil {
			t.Fatal(err)
		}
		return buf.Bytes()
	}
	fast := write(EventWriterOptions{RowGroupRows: 1000})
	rows := write(EventWriterOptions{RowGroupRows: 1000, schema: subsetSchema(schema.Fields)})
	if !bytes.Equal(fast, rows) {
		t.Errorf("the two write paths give different files (%d and %d bytes)", len(fast), len(rows))
	}
}
