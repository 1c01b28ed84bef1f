package export

import (
	"errors"
	"fmt"
	"net/url"
	"slices"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// ErrBadFilter is wrapped by every error of Filter.Validate: the request is
// malformed (an HTTP server answers 400).
var ErrBadFilter = errors.New("bad filter")

// Filter selects the events of a version. The zero value selects every
// event and every column.
type Filter struct {
	From       time.Time          // inclusive; zero means open
	To         time.Time          // exclusive; zero means open
	Sites      []string           // empty means all
	Queues     []string           // empty means all; "" selects events without a queue
	EventTypes []schema.EventType // empty means all
	Activities []string           // empty means all; "" selects events without an activity
	// Columns lists the output columns; empty means all. They must be
	// schema field names; the output keeps schema order whatever the
	// order given.
	Columns []schema.Field
}

// Query returns f as the export endpoint's query parameters (from, to,
// site, queue, type, activity, columns; keys sorted, values in the order
// given), "" for the zero filter. Exports record it in their metadata.
func (f Filter) Query() string {
	q := url.Values{}
	if !f.From.IsZero() {
		q.Set("from", f.From.UTC().Format(time.RFC3339Nano))
	}
	if !f.To.IsZero() {
		q.Set("to", f.To.UTC().Format(time.RFC3339Nano))
	}
	q["site"] = f.Sites
	q["queue"] = f.Queues
	for _, t := range f.EventTypes {
		q.Add("type", string(t))
	}
	q["activity"] = f.Activities
	if len(f.Columns) > 0 {
		cols := make([]string, len(f.Columns))
		for i, c := range f.Columns {
			cols[i] = string(c)
		}
		q.Set("columns", strings.Join(cols, ","))
	}
	return q.Encode()
}

// Validate reports the first problem of f, wrapping ErrBadFilter: a window
// whose from is not before its to, an unknown column, an unknown event type.
func (f Filter) Validate() error {
	if !f.From.IsZero() && !f.To.IsZero() && !f.From.Before(f.To) {
		return fmt.Errorf("filter: from %s is not before to %s (the window is [from, to)): %w",
			f.From.UTC().Format(time.RFC3339Nano), f.To.UTC().Format(time.RFC3339Nano), ErrBadFilter)
	}
	for _, c := range f.Columns {
		if !slices.Contains(schema.Fields, c) {
			names := make([]string, len(schema.Fields))
			for i, s := range schema.Fields {
				names[i] = string(s)
			}
			return fmt.Errorf("filter: unknown column %q; valid columns are %s: %w", truncate(string(c)), strings.Join(names, ", "), ErrBadFilter)
		}
	}
	for _, t := range f.EventTypes {
		if !t.Valid() {
			names := make([]string, len(schema.EventTypes))
			for i, s := range schema.EventTypes {
				names[i] = string(s)
			}
			return fmt.Errorf("filter: unknown event type %q; valid types are %s: %w", truncate(string(t)), strings.Join(names, ", "), ErrBadFilter)
		}
	}
	return nil
}

// truncate shortens a quoted value of a non-identifier column.
func truncate(s string) string {
	if len(s) <= 40 {
		return s
	}
	r := []rune(s)
	if len(r) <= 40 {
		return s
	}
	return string(r[:40]) + "..."
}

// columns returns the selected fields in schema order.
func (f Filter) columns() []schema.Field {
	if len(f.Columns) == 0 {
		return schema.Fields
	}
	var out []schema.Field
	for _, c := range schema.Fields {
		if slices.Contains(f.Columns, c) {
			out = append(out, c)
		}
	}
	return out
}

// matcher is a compiled Filter.
type matcher struct {
	from, to   int64 // unix microseconds; to is exclusive
	hasFrom    bool
	hasTo      bool
	sites      set
	queues     set
	types      set
	activities set
}

type set map[string]struct{}

func newSet[T ~string](vs []T) set {
	if len(vs) == 0 {
		return nil
	}
	s := make(set, len(vs))
	for _, v := range vs {
		s[string(v)] = struct{}{}
	}
	return s
}

func (s set) has(v string) bool {
	if s == nil {
		return true
	}
	_, ok := s[v]
	return ok
}

func (f Filter) compile() *matcher {
	m := &matcher{
		sites: newSet(f.Sites), queues: newSet(f.Queues),
		types: newSet(f.EventTypes), activities: newSet(f.Activities),
	}
	if !f.From.IsZero() {
		m.hasFrom, m.from = true, ceilMicro(f.From)
	}
	if !f.To.IsZero() {
		m.hasTo, m.to = true, ceilMicro(f.To)
	}
	return m
}

// ceilMicro is the first whole microsecond at or after t: stored times are
// whole microseconds, so t' >= t  <=>  t' >= ceilMicro(t).
func ceilMicro(t time.Time) int64 {
	us := t.UnixMicro()
	if time.UnixMicro(us).Before(t) {
		us++
	}
	return us
}

func (m *matcher) timeOK(us int64) bool {
	return (!m.hasFrom || us >= m.from) && (!m.hasTo || us < m.to)
}

// match reports whether e passes the filter.
func (m *matcher) match(e *schema.Event) bool {
	return m.timeOK(e.OccurredAt.UnixMicro()) && m.sites.has(e.Site) && m.queues.has(e.Queue) &&
		m.types.has(string(e.Type)) && m.activities.has(e.Activity)
}

// spanOK reports whether some instant of [min, max] (microseconds) is in
// the window.
func (m *matcher) spanOK(min, max int64) bool {
	return (!m.hasFrom || max >= m.from) && (!m.hasTo || min < m.to)
}

// boundsOK reports whether a column chunk may hold a value of s: its
// non-null values lie in [min, max] (ok false: the chunk has no bounds),
// nulls of them are null (read as ""), of values in all.
func (s set) boundsOK(min, max string, ok bool, nulls, values int64) bool {
	if s == nil {
		return true
	}
	if _, empty := s[""]; empty && nulls > 0 {
		return true
	}
	if !ok {
		// Without bounds only a chunk of nulls alone can be ruled out.
		return nulls < values
	}
	for v := range s {
		if v != "" && v >= min && v <= max {
			return true
		}
	}
	return false
}
