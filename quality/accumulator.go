package quality

import (
	"hash/maphash"
	"maps"
	"slices"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Defaults applied by [NewAccumulator] to zero [Options] fields.
const (
	DefaultCaseHorizon = 30 * 24 * time.Hour
	DefaultMaxSamples  = 5
)

// maxSites caps the per-site counters; events of further sites are
// counted together as "other".
const maxSites = 1000

// defaultPruneEvery is the least number of events between two sweeps of
// idle cases; a sweep also waits for as many events as the last sweep
// kept cases, so its cost per event stays constant and at most twice the
// cases active within the horizon are held.
const defaultPruneEvery = 1 << 16

// Options tune an [Accumulator]. The zero value checks nothing against
// the calendar and uses the defaults.
type Options struct {
	// UploadedAt is when the upload arrived; events later than it are
	// "in the future". Zero disables the check.
	UploadedAt time.Time
	// WindowFrom and WindowTo are the dataset's declared period, the
	// half-open interval [WindowFrom, WindowTo); a zero bound is open.
	WindowFrom, WindowTo time.Time
	// MappedFields lists the schema fields the mapping profile fills. The
	// completeness score averages the optional fields among them; when
	// empty, it averages the optional fields that hold a value in at
	// least one accepted row (see SCORING.md).
	MappedFields []schema.Field
	// CaseHorizon bounds memory: the state of a case idle for longer than
	// this (in event time) is dropped, so a later event of that case is
	// checked as if the case were new. Default [DefaultCaseHorizon].
	CaseHorizon time.Duration
	// MaxSamples is how many sample locations each finding keeps.
	// Default [DefaultMaxSamples].
	MaxSamples int
}

// Accumulator gathers the quality counts of one upload. It is not safe
// for concurrent use; give each file its own and [Accumulator.Merge] them.
//
// Precondition: [Accumulator.Observe] receives the events of one file in
// non-decreasing OccurredAt order. The duplicate and per-case checks rely
// on it; an event earlier than its predecessor is counted as an internal
// "order_breach" finding and skips those two checks.
//
// Instants are compared at microsecond precision, the precision of the
// snapshots.
type Accumulator struct {
	opt                 Options
	uploadAt            int64
	fromAt, toAt        int64
	hasUpload           bool
	hasFrom, hasTo      bool
	horizon             uint64 // microseconds
	pruneEvery          int
	seed                maphash.Seed
	accepted, rejected  int64
	reasons             map[schema.Reason]*finding
	nonEmpty            [numFields]int64
	emptySamples        [numFields][]Sample
	hasTime             bool
	minAt, maxAt        int64
	first, last         time.Time
	future, outside     finding
	startBeforeArrival  finding
	completeBeforeStart finding
	timeRows            int64 // accepted rows with any timestamp problem
	dups                finding
	orderBreaches       finding
	sites               map[string]*int64
	siteOther           int64
	siteCache           [4]siteCounter
	siteNext            int

	// stream state, per file
	seen       bool
	curAt      int64
	inst       instantSet
	base       int64     // the file's first instant
	cases      caseTable // see cases.go
	sincePrune int
	keptCases  int // cases left by the last sweep
}

// finding is a count with its first samples.
type finding struct {
	n       int64
	samples []Sample
}

func (f *finding) add(max int, s Sample) {
	f.n++
	if len(f.samples) < max {
		f.samples = append(f.samples, s)
	}
}

func (f *finding) merge(max int, g *finding) {
	f.n += g.n
	f.samples = appendSamples(f.samples, max, g.samples)
}

func appendSamples(dst []Sample, max int, src []Sample) []Sample {
	for _, s := range src {
		if len(dst) >= max {
			break
		}
		dst = append(dst, s)
	}
	return dst
}

// Field positions in schema.Fields order.
const (
	fSite = iota
	fCaseID
	fSubjectID
	fResourceID
	fEventType
	fActivity
	fQueue
	fOccurredAt
	fPriority
	fChannel
	fOutcome
	fEventID
	numFields
)

// NewAccumulator returns an empty accumulator for one upload.
func NewAccumulator(opt Options) *Accumulator {
	if opt.CaseHorizon <= 0 {
		opt.CaseHorizon = DefaultCaseHorizon
	}
	if opt.MaxSamples <= 0 {
		opt.MaxSamples = DefaultMaxSamples
	}
	a := &Accumulator{
		opt:        opt,
		horizon:    uint64(opt.CaseHorizon.Microseconds()),
		pruneEvery: defaultPruneEvery,
		seed:       maphash.MakeSeed(),
		reasons:    make(map[schema.Reason]*finding),
		sites:      make(map[string]*int64),
		cases:      newCaseTable(),
	}
	if !opt.UploadedAt.IsZero() {
		a.hasUpload, a.uploadAt = true, opt.UploadedAt.UnixMicro()
	}
	if !opt.WindowFrom.IsZero() {
		a.hasFrom, a.fromAt = true, opt.WindowFrom.UnixMicro()
	}
	if !opt.WindowTo.IsZero() {
		a.hasTo, a.toAt = true, opt.WindowTo.UnixMicro()
	}
	return a
}

// Observe counts one accepted event. See the order precondition on
// [Accumulator]. e may be reused once Observe returns.
func (a *Accumulator) Observe(e *schema.Event) {
	if e == nil {
		return
	}
	a.accepted++
	a.countFields(e)
	at := e.OccurredAt.UnixMicro()
	if !a.hasTime || at < a.minAt {
		a.minAt, a.first = at, e.OccurredAt
	}
	if !a.hasTime || at > a.maxAt {
		a.maxAt, a.last = at, e.OccurredAt
	}
	a.hasTime = true
	a.countSite(e.Site)

	problem := false
	if a.hasUpload && at > a.uploadAt {
		a.future.add(a.opt.MaxSamples, sampleOf(e))
		problem = true
	}
	if (a.hasFrom && at < a.fromAt) || (a.hasTo && at >= a.toAt) {
		a.outside.add(a.opt.MaxSamples, sampleOf(e))
		problem = true
	}

	switch {
	case a.seen && at < a.curAt:
		a.orderBreaches.add(a.opt.MaxSamples, sampleOf(e))
		if problem {
			a.timeRows++
		}
		return
	case !a.seen:
		a.base = at
		fallthrough
	case at > a.curAt:
		a.inst.reset()
		a.curAt, a.seen = at, true
	}
	if a.inst.add(e, a.seed) {
		a.dups.add(a.opt.MaxSamples, sampleOf(e))
	}
	rel := uint64(at - a.base)
	if rel > maxRel {
		// Beyond the span a case record holds (about 2283 years from the
		// file's first event: only a placeholder date gets here): saturate
		// rather than wrap.
		rel = maxRel
	}
	if a.observeCase(e, rel) {
		problem = true
	}
	if problem {
		a.timeRows++
	}
	a.sincePrune++
	if a.sincePrune >= a.pruneEvery && a.sincePrune >= a.keptCases {
		a.prune(rel)
	}
}

func sampleOf(e *schema.Event) Sample {
	return Sample{Line: e.Line, CaseID: e.CaseID}
}

func (a *Accumulator) countFields(e *schema.Event) {
	if e.Site != "" {
		a.nonEmpty[fSite]++
	}
	if e.CaseID != "" {
		a.nonEmpty[fCaseID]++
	}
	if e.Type != "" {
		a.nonEmpty[fEventType]++
	}
	if !e.OccurredAt.IsZero() {
		a.nonEmpty[fOccurredAt]++
	}
	a.optional(fSubjectID, e.SubjectID, e)
	a.optional(fResourceID, e.ResourceID, e)
	a.optional(fActivity, e.Activity, e)
	a.optional(fQueue, e.Queue, e)
	a.optional(fPriority, e.Priority, e)
	a.optional(fChannel, e.Channel, e)
	a.optional(fOutcome, e.Outcome, e)
	a.optional(fEventID, e.EventID, e)
}

func (a *Accumulator) optional(i int, v string, e *schema.Event) {
	if v != "" {
		a.nonEmpty[i]++
	} else if len(a.emptySamples[i]) < a.opt.MaxSamples {
		a.emptySamples[i] = append(a.emptySamples[i], sampleOf(e))
	}
}

func (a *Accumulator) countSite(site string) {
	// Files hold one or a few sites: a tiny cache spares most map lookups.
	for i := range a.siteCache {
		if c := &a.siteCache[i]; c.n != nil && c.site == site {
			*c.n++
			return
		}
	}
	n, ok := a.sites[site]
	if !ok {
		if len(a.sites) >= maxSites {
			a.siteOther++
			return
		}
		site = strings.Clone(site) // do not pin the caller's buffers
		n = new(int64)
		a.sites[site] = n
	}
	*n++
	a.siteCache[a.siteNext] = siteCounter{site, n}
	a.siteNext = (a.siteNext + 1) % len(a.siteCache)
}

type siteCounter struct {
	site string
	n    *int64
}

// Reject counts one rejected source row. Only its line, column, field and
// reason are kept, never its message.
func (a *Accumulator) Reject(r schema.Rejection) {
	a.rejected++
	f := a.reasons[r.Reason]
	if f == nil {
		f = new(finding)
		a.reasons[r.Reason] = f
	}
	f.add(a.opt.MaxSamples, Sample{Line: r.Line, Column: r.Column, Field: r.Field})
}

// Merge adds the counts of b, the accumulator of another file of the same
// upload, to a; b must not be used afterwards. a's options apply. Findings
// that need the event stream (exact duplicates, start_before_arrival,
// complete_before_start, order_breach) stay per file: a duplicate or a
// case split across two files is not seen. Samples of a come first.
func (a *Accumulator) Merge(b *Accumulator) {
	if b == nil || b == a {
		return
	}
	max := a.opt.MaxSamples
	a.accepted += b.accepted
	a.rejected += b.rejected
	for r, g := range b.reasons {
		f := a.reasons[r]
		if f == nil {
			f = new(finding)
			a.reasons[r] = f
		}
		f.merge(max, g)
	}
	for i := range a.nonEmpty {
		a.nonEmpty[i] += b.nonEmpty[i]
		a.emptySamples[i] = appendSamples(a.emptySamples[i], max, b.emptySamples[i])
	}
	if b.hasTime {
		if !a.hasTime || b.minAt < a.minAt {
			a.minAt, a.first = b.minAt, b.first
		}
		if !a.hasTime || b.maxAt > a.maxAt {
			a.maxAt, a.last = b.maxAt, b.last
		}
		a.hasTime = true
	}
	a.future.merge(max, &b.future)
	a.outside.merge(max, &b.outside)
	a.startBeforeArrival.merge(max, &b.startBeforeArrival)
	a.completeBeforeStart.merge(max, &b.completeBeforeStart)
	a.timeRows += b.timeRows
	a.dups.merge(max, &b.dups)
	a.orderBreaches.merge(max, &b.orderBreaches)
	// Sorted, so that which sites fit under the cap does not depend on
	// map order.
	for _, s := range slices.Sorted(maps.Keys(b.sites)) {
		n := b.sites[s]
		m, ok := a.sites[s]
		if !ok {
			if len(a.sites) >= maxSites {
				a.siteOther += *n
				continue
			}
			m = new(int64)
			a.sites[s] = m
		}
		*m += *n
	}
	a.siteOther += b.siteOther
}
