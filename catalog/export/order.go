package export

import (
	"strings"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Compare orders events the way every export emits them: schema.Compare,
// by occurred_at, then every other stored field as bytes.
func Compare(a, b *schema.Event) int { return schema.Compare(a, b) }

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
		InstanceID: strings.Clone(e.InstanceID),
		Attrs:      strings.Clone(e.Attrs),
	}
}
