package catalog

import "github.com/flowcat-catalog/flowcat/schema"

// CaseSorter orders pseudonymized events by case (cases.Less: each case's
// events together, in time order) with bounded memory, spilling sorted
// runs of runEvents events to temporary files in dir. Readers of a
// version that need each case whole (the XES export) use it. Its files
// hold only the events given to it; Close deletes them.
type CaseSorter struct{ s *sorter }

// NewCaseSorter returns a CaseSorter with runs in dir (os.TempDir() when
// empty) of at most runEvents events (default 65,536).
func NewCaseSorter(dir string, runEvents int) *CaseSorter {
	if runEvents <= 0 {
		runEvents = 1 << 16
	}
	return &CaseSorter{s: newCaseSorter(dir, runEvents)}
}

// Add takes a copy of e.
func (c *CaseSorter) Add(e *schema.Event) error { return c.s.Add(e) }

// Finish calls fn for every event in case order; the event is valid only
// during the call.
func (c *CaseSorter) Finish(fn func(*schema.Event) error) error { return c.s.Finish(fn) }

// Close deletes the sorter's temporary files.
func (c *CaseSorter) Close() error { return c.s.Close() }
