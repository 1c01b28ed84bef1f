package quality

import "github.com/flowcat-catalog/flowcat/schema"

// Applies is the table of which optional fields completeness judges on
// which event types (SCORING.md, "Where a field applies"): a field left
// empty where it cannot apply (a resource on an arrival) is no gap.
// Fields not listed apply to every type.
var Applies = map[schema.Field][]schema.EventType{
	schema.FieldResourceID: {schema.Start, schema.Complete},
	schema.FieldActivity:   {schema.Enqueue, schema.Start, schema.Complete},
	schema.FieldQueue:      {schema.Enqueue, schema.Start, schema.Abandon, schema.Transfer},
	schema.FieldChannel:    {schema.Arrival},
	schema.FieldOutcome:    {schema.Departure},
	schema.FieldInstanceID: {schema.Start, schema.Complete},
}

// applies reports whether field f is judged on events of type t.
func applies(f schema.Field, t schema.EventType) bool {
	ts, ok := Applies[f]
	if !ok {
		return true
	}
	for _, x := range ts {
		if x == t {
			return true
		}
	}
	return false
}

// applicable returns the events of s of the types field f applies to and
// how many of them hold a value.
func applicable(s *SiteRaw, f schema.Field) (nonEmpty, events int64) {
	for t, tr := range s.ByType {
		if applies(f, t) {
			nonEmpty += tr.NonEmpty[f]
			events += tr.Events
		}
	}
	return nonEmpty, events
}
