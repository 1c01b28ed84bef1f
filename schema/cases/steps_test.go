package cases

import (
	"testing"

	"github.com/flowcat-catalog/flowcat/schema"
)

func TestSteps(t *testing.T) {
	ev := func(typ schema.EventType, act string) *schema.Event { return &schema.Event{Type: typ, Activity: act} }
	var s Steps
	// Overlapping instances of two activities: one step each, at the start.
	for i, c := range []struct {
		e    *schema.Event
		step bool
	}{
		{ev(schema.Arrival, ""), false},
		{ev(schema.Start, "registration"), true},
		{ev(schema.Start, "triage"), true},
		{ev(schema.Complete, "registration"), false},
		{ev(schema.Complete, "triage"), false},
		{ev(schema.Complete, "lab"), true}, // completion only: a step
		{ev(schema.Start, "triage"), true}, // a second instance
		{ev(schema.Start, "triage"), true}, // a third, in parallel
		{ev(schema.Complete, "triage"), false},
		{ev(schema.Complete, "triage"), false},
		{ev(schema.Complete, "triage"), true}, // no start left open
	} {
		if got := s.Step(c.e); got != c.step {
			t.Errorf("event %d (%s %s): step %v, want %v", i, c.e.Type, c.e.Activity, got, c.step)
		}
	}
	s.Reset()
	if !s.Step(ev(schema.Complete, "registration")) {
		t.Error("after Reset a complete without a start is a step")
	}
}

// With instance ids a complete closes the start of its own instance only.
func TestStepsByInstance(t *testing.T) {
	ev := func(typ schema.EventType, inst string) *schema.Event {
		return &schema.Event{Type: typ, Activity: "scan", InstanceID: inst}
	}
	var s Steps
	for i, c := range []struct {
		e    *schema.Event
		step bool
	}{
		{ev(schema.Start, "i1"), true},
		{ev(schema.Start, "i2"), true},
		{ev(schema.Complete, "i2"), false},
		{ev(schema.Complete, "i3"), true}, // its start is not in the log
		{ev(schema.Complete, "i1"), false},
	} {
		if got := s.Step(c.e); got != c.step {
			t.Errorf("event %d (%s %s): step %v, want %v", i, c.e.Type, c.e.InstanceID, got, c.step)
		}
	}
}

// An enqueue, its start and its complete are one instance; an abandon
// ends a queued instance.
func TestStepsWithQueues(t *testing.T) {
	ev := func(typ schema.EventType, act string) *schema.Event { return &schema.Event{Type: typ, Activity: act} }
	var s Steps
	for i, c := range []struct {
		e    *schema.Event
		step bool
	}{
		{ev(schema.Arrival, ""), false},
		{ev(schema.Enqueue, "triage"), true},
		{ev(schema.Start, "triage"), false},
		{ev(schema.Complete, "triage"), false},
		{ev(schema.Enqueue, "consult"), true},
		{ev(schema.Abandon, "consult"), false},
		{ev(schema.Enqueue, "consult"), true},
		{ev(schema.Complete, "consult"), false}, // lost start: still the queued instance
		{ev(schema.Abandon, "lab"), true},       // nothing open: a step of its own
	} {
		if got := s.Step(c.e); got != c.step {
			t.Errorf("event %d (%s %s): step %v, want %v", i, c.e.Type, c.e.Activity, got, c.step)
		}
	}
}
