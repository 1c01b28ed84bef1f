package quality

import (
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// A complete of one step and the start of the next at one instant are a
// handover, not two ends of one interval: same_instant counts the shared
// instant, same_instant_order does not. A start and a complete of one
// activity at one instant bound a zero service and are counted (common
// practice: the order of the two rows is left to chance).
func TestSameInstantOrderWithinOneActivity(t *testing.T) {
	base := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	ev := func(c string, line int64, typ schema.EventType, act string, min int) schema.Event {
		return schema.Event{Line: line, Site: "north", CaseID: c, Type: typ, Activity: act, ResourceID: "r-" + c,
			OccurredAt: base.Add(time.Duration(min) * time.Minute)}
	}
	evs := []schema.Event{
		ev("handover", 1, schema.Start, "triage", 1),
		ev("handover", 2, schema.Complete, "triage", 3),
		ev("handover", 3, schema.Start, "x-ray", 3),
		ev("handover", 4, schema.Complete, "x-ray", 4),
		ev("zero", 5, schema.Start, "triage", 10),
		ev("zero", 6, schema.Complete, "triage", 10),
	}
	r := run(Options{}, evs, nil, nil)
	if got := r.Count(CodeSameInstant); got != 2 {
		t.Errorf("same_instant %d, want 2 (one shared instant in each case)", got)
	}
	if got := r.Count(CodeSameInstantOrder); got != 1 {
		t.Errorf("same_instant_order %d, want 1 (the zero service only)", got)
	}
}
