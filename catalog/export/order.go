package export

import (
	"strings"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Compare orders events the way every export emits them: by occurred_at,
// then by site, case_id, subject_id, resource_id, event_type, activity,
// queue, priority, channel, outcome and event_id, each compared as bytes.
// It returns 0 only for events equal in every stored field, so the order
// is total on content and does not depend on which file an event is in.
func Compare(a, b *schema.Event) int {
	if c := a.OccurredAt.Compare(b.OccurredAt); c != 0 {
		return c
	}
	return compareRest(a, b)
}

// compareRest compares every field but occurred_at, in schema order.
func compareRest(a, b *schema.Event) int {
	if c := strings.Compare(a.Site, b.Site); c != 0 {
		return c
	}
	if c := strings.Compare(a.CaseID, b.CaseID); c != 0 {
		return c
	}
	if c := strings.Compare(a.SubjectID, b.SubjectID); c != 0 {
		return c
	}
	if c := strings.Compare(a.ResourceID, b.ResourceID); c != 0 {
		return c
	}
	if c := strings.Compare(string(a.Type), string(b.Type)); c != 0 {
		return c
	}
	if c := strings.Compare(a.Activity, b.Activity); c != 0 {
		return c
	}
	if c := strings.Compare(a.Queue, b.Queue); c != 0 {
		return c
	}
	if c := strings.Compare(a.Priority, b.Priority); c != 0 {
		return c
	}
	if c := strings.Compare(a.Channel, b.Channel); c != 0 {
		return c
	}
	if c := strings.Compare(a.Outcome, b.Outcome); c != 0 {
		return c
	}
	return strings.Compare(a.EventID, b.EventID)
}

// cloneEvent copies e with strings of its own: strings read from Parquet
// may point into buffers the reader reuses.
func cloneEvent(dst, e *schema.Event) {
	*dst = schema.Event{
		Site:       strings.Clone(e.Site),
		CaseID:     strings.Clone(e.CaseID),
		SubjectID:  strings.Clone(e.SubjectID),
		ResourceID: strings.Clone(e.ResourceID),
		Type:       schema.EventType(strings.Clone(string(e.Type))),
		Activity:   strings.Clone(e.Activity),
		Queue:      strings.Clone(e.Queue),
		OccurredAt: e.OccurredAt.UTC(),
		Priority:   strings.Clone(e.Priority),
		Channel:    strings.Clone(e.Channel),
		Outcome:    strings.Clone(e.Outcome),
		EventID:    strings.Clone(e.EventID),
	}
}
