package schema

import "strings"

// Compare orders events by occurred_at, then by CompareContent. It returns
// 0 only for events equal in every stored field, so the order is total on
// content and does not depend on which file an event is in.
func Compare(a, b *Event) int {
	if c := a.OccurredAt.Compare(b.OccurredAt); c != 0 {
		return c
	}
	return CompareContent(a, b)
}

// CompareContent compares every stored field but occurred_at, in schema
// order (site, case_id, subject_id, resource_id, event_type, activity,
// queue, priority, channel, outcome, event_id, instance_id), each as bytes,
// then the event attribute values.
func CompareContent(a, b *Event) int {
	for _, off := range textOffsets {
		if c := strings.Compare(*str(a, off), *str(b, off)); c != 0 {
			return c
		}
	}
	// Last, so that events without attributes keep their order.
	return strings.Compare(a.Attrs, b.Attrs)
}

// Rank is t's position in EventTypes, the order a case usually passes the
// types; -1 for an unknown type.
func (t EventType) Rank() int {
	for i, u := range EventTypes {
		if u == t {
			return i
		}
	}
	return -1
}
