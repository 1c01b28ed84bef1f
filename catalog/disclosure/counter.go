package disclosure

import "github.com/flowcat-catalog/flowcat/catalog/internal/tally"

// Counter counts class keys exactly with bounded memory.
type Counter = tally.Counter

// NewCounter returns a counter that spills to dir past max bytes of keys.
func NewCounter(dir string, max int) *Counter { return tally.New(dir, max) }
