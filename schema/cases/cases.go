// Package cases owns the one per-case computation of flowcat: from the
// events of one case, in time order, it derives the case's record (first
// and last instant, events, arrival, start and end, wait, service, length
// of stay, outcome, activities, trace variant) and the waits and services
// it holds. The case table, the summary and the quality report all take
// their case-level figures from it, so they cannot disagree.
//
// A case is its case id within a dataset, over every file of a version,
// however long it idles: nothing here cuts a case by time. Memory is one
// case at a time: callers feed the events grouped by case (catalog sorts
// them by case on disk first).
package cases

import (
	"cmp"
	"fmt"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Outcome says how a case ended, as far as its events tell.
type Outcome string

// Outcomes. A case's outcome is decided by its events in this order:
// its last ending event was an abandon (abandoned); its last event is a
// transfer (transferred); it has a start or complete and has not been
// left in service or waiting (served); it departed without any service
// (left_unserved); otherwise it is still open: waiting, in service, or
// only arrived.
const (
	Served       Outcome = "served"
	Abandoned    Outcome = "abandoned"
	Transferred  Outcome = "transferred"
	LeftUnserved Outcome = "left_unserved"
	Open         Outcome = "open"
)

// MaxActivities caps the distinct activities told apart within one case;
// beyond it Record.Activities stops growing (a case with more than this
// many distinct steps is not a service case).
const MaxActivities = 4096

// Record is one case: what the case table stores, one row per case.
// Instants are Unix microseconds, durations microseconds; a pointer is nil
// where the case's events do not measure it.
type Record struct {
	CaseID    string
	Site      string // the site of the case's first event
	Sites     int    // distinct sites among its events
	SubjectID string // the first subject named, if any
	First     int64
	Last      int64
	Events    int64
	Arrival   *int64 // the first arrival
	Start     *int64 // the first start
	End       *int64 // the last departure; without one, the abandon that ended the case
	Wait      *int64 // first start (or abandon) minus the first arrival or enqueue before it
	Service   *int64 // sum of the measured services (start to its complete)
	Stay      *int64 // End minus Arrival, when both are known and in order
	Outcome   Outcome
	// Activities counts distinct non-empty activities (up to MaxActivities).
	Activities int
	// Variant is a 64-bit FNV-1a hash (FIPS-free, Fowler/Noll/Vo) of the
	// ordered sequence of the case's activities (of events that name one),
	// each followed by a 0xff byte, so cases with the same trace share it.
	Variant uint64
	// Steps records which stages were seen: arrival, enqueue, start,
	// complete, abandon, transfer, departure, by schema.EventTypes index.
	Steps [7]int64
	// The case's presence in the census (see [Builder.Terminal] and
	// [Exits]): Stays counts its entries (an arrival while not present, or
	// its first event when that is no arrival: already in the system when
	// the data begins), Present sums the µs of the stays that ended by an
	// exit, and OpenSince is the entry of a stay still open at its last
	// event (nil when none).
	Stays     int64
	Present   int64
	OpenSince *int64
}

// Exits reports whether an event of type t takes a present case out of
// the census: a departure, an abandon (the caller hung up, the patient
// left without being seen), or a type the dataset declares terminal
// (schema.Profile.Terminal). A transfer that is the case's last event is
// an exit too (the case moved elsewhere); the caller judges that at the
// case's end.
func Exits(t schema.EventType, terminal []schema.EventType) bool {
	if t == schema.Departure || t == schema.Abandon {
		return true
	}
	for _, x := range terminal {
		if x == t {
			return true
		}
	}
	return false
}

// Duration is the case duration, first to last event, in microseconds.
func (r *Record) Duration() int64 { return r.Last - r.First }

// Has reports whether the case holds an event of type t.
func (r *Record) Has(t schema.EventType) bool {
	i := t.Rank()
	return i >= 0 && r.Steps[i] > 0
}

// Wait is one wait of a case: from an arrival, enqueue or transfer into a
// queue to the start that served it or the abandon that ended it.
type Wait struct {
	Site      string
	Queue     string // "" when the log names none
	At        int64  // when the wait began
	Duration  int64  // µs; negative only for a start before its anchor
	Abandoned bool
	// Open marks a wait that never ended: the case re-queued elsewhere,
	// departed or ended while waiting. Duration is then 0.
	Open bool
}

// Service is one measured service: a start and the complete that ends it.
// They pair by activity instance (schema.Event.InstanceID) where the log
// has one; otherwise by activity (or, when one of them names none, the
// latest open start). See [Builder] for the rule.
type Service struct {
	Site     string
	Activity string
	Queue    string // the queue it was served from, if known
	At       int64
	Duration int64 // µs; negative only when the complete precedes the start
}

// Observer takes the per-case computation's output. Event is called for
// every event of a case in order, then Wait and Service as they are
// measured, then Case once with the finished record. The pointers are
// valid only during the call.
type Observer interface {
	Event(e *schema.Event)
	Wait(w *Wait)
	Service(s *Service)
	Case(r *Record)
}

// Builder runs the per-case computation over events grouped by case and
// ordered by time within each case. It is not safe for concurrent use.
type Builder struct {
	// Terminal are the event types, besides departure and abandon, that
	// end a case's presence (see [Exits]); set before the first Add.
	Terminal []schema.EventType

	obs []Observer
	cur Record
	has bool
	// open state of the current case
	sites    []string
	acts     map[string]struct{}
	variant  hashState
	steps    Steps // which events are steps of the variant
	anchor   int64
	anchorQ  string
	anchorOK bool
	open     []openStart // starts not yet completed, by activity
	svcSum   int64
	svcN     int
	firstAnc *int64
	lastType schema.EventType
	endAband bool
	inSvc    bool
	waiting  bool
	depart   *int64
	cases    int64
	present  bool  // in the census
	stayFrom int64 // entry of the present stay
}

type hashState struct{ h uint64 }

func (h *hashState) reset() { h.h = 14695981039346656037 }
func (h *hashState) add(s string) {
	// FNV-1a over the activity's bytes, then a 0xff byte (never in UTF-8)
	// as separator, so ("ab","c") and ("a","bc") differ.
	for i := 0; i < len(s); i++ {
		h.h ^= uint64(s[i])
		h.h *= fnvPrime
	}
	h.h ^= 0xff
	h.h *= fnvPrime
}

const fnvPrime = 1099511628211

// NewBuilder returns a builder that reports to obs.
func NewBuilder(obs ...Observer) *Builder {
	return &Builder{obs: obs, acts: map[string]struct{}{}}
}

// Cases is how many cases the builder has finished.
func (b *Builder) Cases() int64 { return b.cases }

// Add takes the next event. An event of another case than the previous
// one finishes that case first.
func (b *Builder) Add(e *schema.Event) {
	if b.has && e.CaseID != b.cur.CaseID {
		b.Flush()
	}
	at := e.OccurredAt.UnixMicro()
	if !b.has {
		b.begin(e, at)
	}
	r := &b.cur
	r.Events++
	r.Last = max(r.Last, at)
	if i := e.Type.Rank(); i >= 0 {
		r.Steps[i]++
	}
	if r.SubjectID == "" && e.SubjectID != "" {
		r.SubjectID = strings.Clone(e.SubjectID)
	}
	if !contains(b.sites, e.Site) {
		b.sites = append(b.sites, strings.Clone(e.Site))
	}
	if e.Activity != "" {
		if _, ok := b.acts[e.Activity]; !ok && len(b.acts) < MaxActivities {
			b.acts[strings.Clone(e.Activity)] = struct{}{}
		}
		if b.steps.Step(e) {
			b.variant.add(e.Activity)
		}
	}
	for _, o := range b.obs {
		o.Event(e)
	}
	b.step(e, at)
	b.presence(e.Type, at)
	b.lastType = e.Type
}

// presence keeps the case's census: it enters at an arrival while absent
// (or at its first event, see Record.Stays) and leaves at an exit.
func (b *Builder) presence(t schema.EventType, at int64) {
	r := &b.cur
	switch {
	case !b.present && (t == schema.Arrival || r.Events == 1):
		b.present, b.stayFrom = true, at
		r.Stays++
	case b.present && Exits(t, b.Terminal):
		b.present = false
		r.Present += at - b.stayFrom
	}
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

func (b *Builder) begin(e *schema.Event, at int64) {
	b.has = true
	b.cur = Record{CaseID: strings.Clone(e.CaseID), Site: strings.Clone(e.Site), First: at, Last: at}
	b.sites = b.sites[:0]
	clear(b.acts)
	b.variant.reset()
	b.steps.Reset()
	b.anchorOK, b.firstAnc = false, nil
	b.open = b.open[:0]
	b.svcSum, b.svcN = 0, 0
	b.endAband, b.inSvc, b.waiting = false, false, false
	b.present = false
}

// step measures waits and services. A wait opens at an arrival, enqueue
// or transfer into a queue (a new queue re-anchors it) and ends at the
// next start (served) or abandon; a service opens at a start and ends at
// the next complete of the same activity (see matchStart).
func (b *Builder) step(e *schema.Event, at int64) {
	r := &b.cur
	switch e.Type {
	case schema.Arrival, schema.Enqueue, schema.Transfer:
		if e.Type == schema.Arrival && r.Arrival == nil {
			r.Arrival = ptr(at)
		}
		if e.Type != schema.Transfer && b.firstAnc == nil {
			b.firstAnc = ptr(at)
		}
		if e.Queue != "" {
			if !b.anchorOK || b.anchorQ != e.Queue {
				b.dropAnchor(e.Site)
				b.anchor, b.anchorQ, b.anchorOK = at, e.Queue, true
			}
		} else if !b.anchorOK && e.Type != schema.Transfer {
			b.anchor, b.anchorQ, b.anchorOK = at, "", true
		}
		if e.Type != schema.Transfer {
			b.waiting = true
		}
	case schema.Start:
		if r.Start == nil {
			r.Start = ptr(at)
			if b.firstAnc != nil && r.Wait == nil {
				r.Wait = ptr(at - *b.firstAnc)
			}
		}
		q := e.Queue
		if b.anchorOK {
			if q == "" {
				q = b.anchorQ
			}
			b.emitWait(&Wait{Site: e.Site, Queue: q, At: b.anchor, Duration: at - b.anchor})
			b.anchorOK = false
		}
		b.openStart(openStart{act: e.Activity, inst: e.InstanceID, queue: q, at: at})
		b.inSvc, b.waiting, b.endAband = true, false, false
	case schema.Complete:
		if i := b.matchStart(e.Activity, e.InstanceID); i >= 0 {
			st := b.open[i]
			b.open = append(b.open[:i], b.open[i+1:]...)
			act := st.act
			if act == "" {
				act = e.Activity
			}
			d := at - st.at
			b.emitService(&Service{Site: e.Site, Activity: act, Queue: st.queue, At: st.at, Duration: d})
			if d >= 0 {
				b.svcSum += d
				b.svcN++
			}
		}
		b.inSvc = len(b.open) > 0
	case schema.Abandon:
		if b.anchorOK {
			q := e.Queue
			if q == "" {
				q = b.anchorQ
			}
			if r.Wait == nil && r.Start == nil && b.firstAnc != nil {
				r.Wait = ptr(at - *b.firstAnc)
			}
			b.emitWait(&Wait{Site: e.Site, Queue: q, At: b.anchor, Duration: at - b.anchor, Abandoned: true})
			b.anchorOK = false
		}
		b.endAband, b.waiting = true, false
		if r.End == nil || *r.End <= at {
			r.End = ptr(at)
		}
	case schema.Departure:
		b.depart = ptr(at)
		b.waiting, b.inSvc = false, false
		b.dropAnchor(e.Site)
		b.open = b.open[:0]
	}
}

func ptr(x int64) *int64 { return &x }

// openStart is a start waiting for its complete.
type openStart struct {
	act, inst, queue string
	at               int64
}

// maxOpenStarts bounds the starts a case holds open at once; beyond it
// the oldest is taken as never completed.
const maxOpenStarts = 64

// openStart opens a service. A start of an instance already open (same
// instance id; without one, same activity and no instance id) replaces
// that one: its complete was lost.
func (b *Builder) openStart(st openStart) {
	for i := range b.open {
		if o := &b.open[i]; o.inst == st.inst && (st.inst != "" || o.act == st.act) {
			b.open = append(b.open[:i], b.open[i+1:]...)
			break
		}
	}
	if len(b.open) >= maxOpenStarts {
		b.open = append(b.open[:0], b.open[1:]...)
	}
	st.act, st.inst, st.queue = strings.Clone(st.act), strings.Clone(st.inst), strings.Clone(st.queue)
	b.open = append(b.open, st)
}

// matchStart returns the open start that a complete of activity act and
// activity instance inst ends; -1 when none is open. With an instance id,
// the open start of that instance; failing that (or without one), the
// latest open start of the same activity that names no other instance,
// or, when either names no activity, the latest. Services may overlap
// within a case (a lab test during an assessment; two scans at once): the
// instance id pairs each execution with its own complete, the activity
// pairs different activities apart.
func (b *Builder) matchStart(act, inst string) int {
	if inst != "" {
		for i := len(b.open) - 1; i >= 0; i-- {
			if b.open[i].inst == inst {
				return i
			}
		}
	}
	for i := len(b.open) - 1; i >= 0; i-- {
		if o := &b.open[i]; o.act == act && (o.inst == "" || inst == "") {
			return i
		}
	}
	if act == "" && len(b.open) > 0 {
		return len(b.open) - 1
	}
	for i := len(b.open) - 1; i >= 0; i-- {
		if b.open[i].act == "" {
			return i
		}
	}
	return -1
}

// dropAnchor reports the open wait, if any, as never ended.
func (b *Builder) dropAnchor(site string) {
	if b.anchorOK {
		b.emitWait(&Wait{Site: site, Queue: b.anchorQ, At: b.anchor, Open: true})
		b.anchorOK = false
	}
}

func (b *Builder) emitWait(w *Wait) {
	for _, o := range b.obs {
		o.Wait(w)
	}
}

func (b *Builder) emitService(s *Service) {
	for _, o := range b.obs {
		o.Service(s)
	}
}

// Flush finishes the current case, if any, and reports its record.
func (b *Builder) Flush() {
	if !b.has {
		return
	}
	r := &b.cur
	b.dropAnchor(b.sites[len(b.sites)-1])
	r.Sites = len(b.sites)
	r.Activities = len(b.acts)
	r.Variant = b.variant.h
	if b.depart != nil {
		r.End = b.depart
	}
	if b.svcN > 0 {
		r.Service = ptr(b.svcSum)
	}
	if r.End != nil && r.Arrival != nil && *r.End >= *r.Arrival {
		r.Stay = ptr(*r.End - *r.Arrival)
	}
	if b.present {
		if b.lastType == schema.Transfer { // transferred out: left at the transfer
			r.Present += r.Last - b.stayFrom
		} else {
			r.OpenSince = ptr(b.stayFrom)
		}
	}
	served := r.Steps[2] > 0 || r.Steps[3] > 0
	switch {
	case b.endAband && b.depart == nil || b.endAband && !served:
		r.Outcome = Abandoned
	case b.lastType == schema.Transfer:
		r.Outcome = Transferred
	case served && !b.inSvc && !b.waiting:
		r.Outcome = Served
	case b.depart != nil && !served:
		r.Outcome = LeftUnserved
	default:
		r.Outcome = Open
	}
	for _, o := range b.obs {
		o.Case(r)
	}
	b.cases++
	b.has = false
	b.depart = nil
}

// Less orders events the way the per-case computation takes them: by
// case, then instant, then event type in lifecycle order (an arrival
// before a start at the same instant), then position in their snapshot
// file (Event.Row: the order of the partner's file, for events of one
// instant in one file), then content, then source line. Every pass that
// measures cases (the ingest, a version's full pass, its case groups, a
// filtered summary) sets Row the same way, so they agree.
func Less(a, b *schema.Event) int {
	if c := strings.Compare(a.CaseID, b.CaseID); c != 0 {
		return c
	}
	if c := a.OccurredAt.Compare(b.OccurredAt); c != 0 {
		return c
	}
	if c := a.Type.Rank() - b.Type.Rank(); c != 0 {
		return c
	}
	if c := cmp.Compare(a.Row, b.Row); c != 0 {
		return c
	}
	if c := schema.CompareContent(a, b); c != 0 {
		return c
	}
	switch {
	case a.Line < b.Line:
		return -1
	case a.Line > b.Line:
		return 1
	}
	return 0
}

// Row is the case table's Parquet layout: one row per case, in case_id
// order. Instants are TIMESTAMP(MICROS, UTC); durations are seconds; a
// column is NULL where the case's events do not measure it.
type Row struct {
	CaseID          string     `parquet:"case_id,plain" json:"case_id"`
	Site            string     `parquet:"site,dict" json:"site"`
	Sites           int32      `parquet:"sites" json:"sites"`
	SubjectID       *string    `parquet:"subject_id,optional,plain" json:"subject_id,omitempty"`
	FirstAt         time.Time  `parquet:"first_at,timestamp(microsecond:utc)" json:"first_at"`
	LastAt          time.Time  `parquet:"last_at,timestamp(microsecond:utc)" json:"last_at"`
	Events          int64      `parquet:"events" json:"events"`
	ArrivalAt       *time.Time `parquet:"arrival_at,optional,timestamp(microsecond:utc)" json:"arrival_at,omitempty"`
	StartAt         *time.Time `parquet:"start_at,optional,timestamp(microsecond:utc)" json:"start_at,omitempty"`
	EndAt           *time.Time `parquet:"end_at,optional,timestamp(microsecond:utc)" json:"end_at,omitempty"`
	DurationSeconds float64    `parquet:"duration_seconds" json:"duration_seconds"`
	WaitSeconds     *float64   `parquet:"wait_seconds,optional" json:"wait_seconds,omitempty"`
	ServiceSeconds  *float64   `parquet:"service_seconds,optional" json:"service_seconds,omitempty"`
	StaySeconds     *float64   `parquet:"stay_seconds,optional" json:"stay_seconds,omitempty"`
	Outcome         string     `parquet:"outcome,dict" json:"outcome"`
	Activities      int32      `parquet:"activities" json:"activities"`
	Variant         string     `parquet:"variant,dict" json:"variant"`
}

// RowColumns describes the case table's columns, in Row order, for
// dictionaries and docs.
var RowColumns = []struct{ Name, Type, Meaning string }{
	{"case_id", "string", "the case (a pseudonym)"},
	{"site", "string", "the site of the case's first event"},
	{"sites", "int32", "distinct sites among its events"},
	{"subject_id", "string, null", "the first subject named (a pseudonym)"},
	{"first_at", "timestamp[us, UTC]", "its first event"},
	{"last_at", "timestamp[us, UTC]", "its last event"},
	{"events", "int64", "its events"},
	{"arrival_at", "timestamp[us, UTC], null", "its first arrival"},
	{"start_at", "timestamp[us, UTC], null", "its first start"},
	{"end_at", "timestamp[us, UTC], null", "its last departure, or the abandon that ended it"},
	{"duration_seconds", "double", "case duration: last_at minus first_at"},
	{"wait_seconds", "double, null", "first start (or abandon) minus the first arrival or enqueue"},
	{"service_seconds", "double, null", "sum of its measured services (start to complete)"},
	{"stay_seconds", "double, null", "end_at minus arrival_at"},
	{"outcome", "string", "served, abandoned, transferred, left_unserved or open"},
	{"activities", "int32", "distinct activities"},
	{"variant", "string", "16 hex digits: a hash of its ordered activity sequence, one step per activity instance"},
}

// Row returns r in the case table's layout.
func (r *Record) Row() Row {
	ts := func(p *int64) *time.Time {
		if p == nil {
			return nil
		}
		t := time.UnixMicro(*p).UTC()
		return &t
	}
	sec := func(p *int64) *float64 {
		if p == nil {
			return nil
		}
		s := float64(*p) / 1e6
		return &s
	}
	row := Row{
		CaseID: r.CaseID, Site: r.Site, Sites: int32(r.Sites),
		FirstAt: time.UnixMicro(r.First).UTC(), LastAt: time.UnixMicro(r.Last).UTC(), Events: r.Events,
		ArrivalAt: ts(r.Arrival), StartAt: ts(r.Start), EndAt: ts(r.End),
		DurationSeconds: float64(r.Duration()) / 1e6,
		WaitSeconds:     sec(r.Wait), ServiceSeconds: sec(r.Service), StaySeconds: sec(r.Stay),
		Outcome: string(r.Outcome), Activities: int32(r.Activities), Variant: fmt.Sprintf("%016x", r.Variant),
	}
	if r.SubjectID != "" {
		s := r.SubjectID
		row.SubjectID = &s
	}
	return row
}
