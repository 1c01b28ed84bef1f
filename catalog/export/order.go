package export

import "github.com/flowcat-catalog/flowcat/schema"

// Compare orders events the way every export emits them: schema.Compare,
// by occurred_at, then every other stored field as bytes.
func Compare(a, b *schema.Event) int { return schema.Compare(a, b) }

// cloneEvent copies e with strings of its own: strings read from Parquet
// may point into buffers the reader reuses.
func cloneEvent(dst, e *schema.Event) {
	*dst = *e
	dst.OccurredAt = e.OccurredAt.UTC()
	dst.Line = 0
	dst.CloneStrings()
}
