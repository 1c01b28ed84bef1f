package summary

import (
	"math"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Defaults applied by [New] to zero [Options] fields.
const (
	DefaultCaseHorizon = 30 * 24 * time.Hour
	DefaultResolution  = time.Hour
	DefaultExactValues = 4096
)

// DefaultWaitThresholds are the waits whose exceedance shares are reported
// when Options.WaitThresholds is empty.
var DefaultWaitThresholds = []time.Duration{15 * time.Minute, time.Hour, 4 * time.Hour}

// maxGroups caps the sites, queues and activities tracked one by one; the
// events of further names are counted under OtherGroup.
const maxGroups = 1000

// OtherGroup names the group that collects sites, queues or activities
// beyond the first 1000 of each.
const OtherGroup = "(other)"

// sweepEvery is the number of events between two sweeps of idle cases.
const sweepEvery = 1 << 16

// Options tune an [Accumulator]. The zero value uses UTC and the defaults.
// Accumulators merge only when their options agree.
type Options struct {
	// Location is the zone of the site's wall clock, for hours of the week
	// and days; nil means UTC.
	Location *time.Location
	// WaitThresholds are the waits whose exceedance shares are reported,
	// per queue. Default [DefaultWaitThresholds].
	WaitThresholds []time.Duration
	// CaseHorizon bounds memory: a case idle for longer than this (in event
	// time) is closed at its last event, and a later event of it opens a
	// new case. Default [DefaultCaseHorizon].
	CaseHorizon time.Duration
	// Resolution is the width of the occupancy buckets, at least a second.
	// Default [DefaultResolution].
	Resolution time.Duration
	// ExactValues is the most distinct values a distribution keeps exactly
	// before it collapses to log buckets of relative error 0.5%.
	// Default [DefaultExactValues].
	ExactValues int
}

// Accumulator gathers the summary of the events of one file, observed in
// non-decreasing OccurredAt order (catalog sorts them). It is not safe for
// concurrent use. Give each file its own accumulator and merge them.
//
// Per-case state is bounded: a case is held from its first event until its
// departure, until it has been idle for Options.CaseHorizon, or until
// [Accumulator.Summary], [Accumulator.Merge] or [Accumulator.MarshalBinary]
// close every open case at its last event. So a case whose events span two
// files counts as two cases (two arrivals, two stays), and a wait or a
// service that starts in one file and ends in the next is not measured.
type Accumulator struct {
	opt     Options
	loc     *time.Location
	thr     []int64 // µs
	horizon int64   // µs
	res     int64   // µs
	cap     int

	events     uint64
	types      [7]uint64
	otherTypes uint64
	hasTime    bool
	minAt      int64
	maxAt      int64
	outOfOrder uint64

	cases, subjects, resources *distinct

	sites  groups[siteGroup]
	queues groups[queueGroup]
	acts   groups[activityGroup]

	arrivals uint64
	arrWeek  [168]uint64
	arrDay   map[int32]uint64
	days     observed // local days observed
	los      *dist
	occ      map[int64]*occBucket

	// stream state of the current file
	open       map[uint64]caseState
	prevAt     int64
	segHas     bool
	segFirst   int64
	segLast    int64
	sinceSweep int
	lastRes    string
	zoneLo     int64
	zoneHi     int64
	zoneOff    int64
}

type siteGroup struct {
	name   string
	events uint64
	arr    [168]uint64
}

type queueGroup struct {
	name      string
	events    uint64
	arr       [168]uint64
	served    *dist // waits that ended in a start
	abandoned *dist // waits that ended in an abandon
	over      []uint64
	negative  uint64
	svcN      uint64 // services started from the queue
	svcSum    u128
}

type activityGroup struct {
	name     string
	events   uint64
	svc      *dist
	negative uint64
}

// occBucket holds what happened in one occupancy bucket: arrivals and
// departures with their summed remaining time to the bucket's end (µs), so
// that the time-average of the number in system is exact.
type occBucket struct {
	arr, dep         uint64
	arrRest, depRest int64
}

// caseState is the per-case state, about 48 bytes.
type caseState struct {
	first, last int64
	anchor      int64 // start of the open wait
	svcStart    int64 // start of the open service
	pendQ       int32 // queue of the open wait, -1 none named
	svcAct      int32
	svcQ        int32
	flags       uint8
}

const (
	fAnchor  = 1 << iota // a wait is open
	fSvc                 // a service is open
	fSubject             // the case's subject was counted
)

// groups indexes named groups, with a one-entry cache for the common case
// of consecutive events naming the same group.
type groups[T any] struct {
	idx      map[string]int32
	list     []*T
	lastName string
	last     int32
	make     func(name string) *T
}

func newGroups[T any](mk func(string) *T) groups[T] {
	return groups[T]{idx: map[string]int32{}, last: -1, make: mk}
}

func (g *groups[T]) get(name string) int32 {
	if g.last >= 0 && name == g.lastName {
		return g.last
	}
	i, ok := g.idx[name]
	if !ok {
		if len(g.list) >= maxGroups {
			name = OtherGroup
			if i, ok = g.idx[name]; ok {
				g.lastName, g.last = name, i
				return i
			}
		}
		i = int32(len(g.list))
		g.idx[name] = i
		g.list = append(g.list, g.make(name))
	}
	g.lastName, g.last = name, i
	return i
}

// New returns an empty accumulator.
func New(opt Options) *Accumulator {
	if opt.Location == nil {
		opt.Location = time.UTC
	}
	if len(opt.WaitThresholds) == 0 {
		opt.WaitThresholds = DefaultWaitThresholds
	}
	if opt.CaseHorizon <= 0 {
		opt.CaseHorizon = DefaultCaseHorizon
	}
	if opt.Resolution < time.Second {
		opt.Resolution = DefaultResolution
	}
	if opt.ExactValues <= 0 {
		opt.ExactValues = DefaultExactValues
	}
	a := &Accumulator{
		opt:       opt,
		loc:       opt.Location,
		horizon:   opt.CaseHorizon.Microseconds(),
		res:       opt.Resolution.Microseconds(),
		cap:       opt.ExactValues,
		cases:     newDistinct(),
		subjects:  newDistinct(),
		resources: newDistinct(),
		arrDay:    map[int32]uint64{},
		los:       newDist(),
		occ:       map[int64]*occBucket{},
		open:      map[uint64]caseState{},
		zoneLo:    math.MaxInt64,
		zoneHi:    math.MinInt64,
	}
	for _, t := range opt.WaitThresholds {
		a.thr = append(a.thr, t.Microseconds())
	}
	nthr := len(a.thr)
	a.sites = newGroups(func(n string) *siteGroup { return &siteGroup{name: n} })
	a.queues = newGroups(func(n string) *queueGroup {
		return &queueGroup{name: n, served: newDist(), abandoned: newDist(), over: make([]uint64, nthr)}
	})
	a.acts = newGroups(func(n string) *activityGroup { return &activityGroup{name: n, svc: newDist()} })
	return a
}

func typeIndex(t schema.EventType) int {
	switch t {
	case schema.Arrival:
		return 0
	case schema.Enqueue:
		return 1
	case schema.Start:
		return 2
	case schema.Complete:
		return 3
	case schema.Abandon:
		return 4
	case schema.Transfer:
		return 5
	case schema.Departure:
		return 6
	}
	return -1
}

// Observe adds one event; see the order precondition on [Accumulator].
// An event earlier than its predecessor is counted (OutOfOrder) and used
// as it is; durations that come out negative are counted apart and left
// out of the distributions. e may be reused once Observe returns.
func (a *Accumulator) Observe(e *schema.Event) {
	if e == nil {
		return
	}
	at := e.OccurredAt.UnixMicro()
	if a.hasTime && at < a.prevAt {
		a.outOfOrder++
	}
	a.prevAt = at
	if !a.hasTime || at < a.minAt {
		a.minAt = at
	}
	if !a.hasTime || at > a.maxAt {
		a.maxAt = at
	}
	a.hasTime = true
	// A stretch of observation ends at a silence longer than
	// ObservationGap; its days are observed, the silence's are not.
	if a.segHas && (at > a.segLast+observationGap || at < a.segFirst-observationGap) {
		a.endStretch()
	}
	if !a.segHas {
		a.segHas, a.segFirst, a.segLast = true, at, at
	}
	a.segFirst = min(a.segFirst, at)
	a.segLast = max(a.segLast, at)
	a.events++
	if ti := typeIndex(e.Type); ti >= 0 {
		a.types[ti]++
	} else {
		a.otherTypes++
	}
	si := a.sites.get(e.Site)
	a.sites.list[si].events++
	qi, ai := int32(-1), int32(-1)
	if e.Queue != "" {
		qi = a.queues.get(e.Queue)
		a.queues.list[qi].events++
	}
	if e.Activity != "" {
		ai = a.acts.get(e.Activity)
		a.acts.list[ai].events++
	}
	if e.ResourceID != "" && e.ResourceID != a.lastRes {
		a.resources.add(hashString(e.ResourceID))
		a.lastRes = e.ResourceID
	}

	k := hashString(e.CaseID)
	cs, ok := a.open[k]
	if ok && at-cs.last > a.horizon {
		a.close(&cs, cs.last)
		ok = false
	}
	if !ok {
		cs = caseState{first: at, last: at, pendQ: -1, svcAct: -1, svcQ: -1}
		a.cases.add(k)
		how, day := a.local(at)
		a.arrivals++
		a.arrWeek[how]++
		a.arrDay[day]++
		a.sites.list[si].arr[how]++
	}
	if e.SubjectID != "" && cs.flags&fSubject == 0 {
		a.subjects.add(hashString(e.SubjectID))
		cs.flags |= fSubject
	}
	switch e.Type {
	case schema.Arrival, schema.Enqueue, schema.Transfer:
		if qi >= 0 {
			if cs.flags&fAnchor == 0 || cs.pendQ != qi {
				cs.anchor, cs.pendQ = at, qi
				cs.flags |= fAnchor
				how, _ := a.local(at)
				a.queues.list[qi].arr[how]++
			}
		} else if cs.flags&fAnchor == 0 && e.Type != schema.Transfer {
			cs.anchor, cs.pendQ = at, -1
			cs.flags |= fAnchor
		}
	case schema.Start:
		q := qi
		if cs.flags&fAnchor != 0 {
			if q < 0 {
				q = cs.pendQ
			}
			if q < 0 {
				q = a.queues.get("")
			}
			a.wait(q, at-cs.anchor, false)
			cs.flags &^= fAnchor
		}
		cs.svcStart, cs.svcAct, cs.svcQ = at, ai, q
		cs.flags |= fSvc
	case schema.Complete:
		if cs.flags&fSvc != 0 && (ai < 0 || cs.svcAct < 0 || ai == cs.svcAct) {
			act := cs.svcAct
			if act < 0 {
				act = ai
			}
			if act < 0 {
				act = a.acts.get("")
			}
			d := at - cs.svcStart
			g := a.acts.list[act]
			if d < 0 {
				g.negative++
			} else {
				g.svc.add(d, a.cap)
				if cs.svcQ >= 0 {
					q := a.queues.list[cs.svcQ]
					q.svcN++
					q.svcSum.add(uint64(d))
				}
			}
			cs.flags &^= fSvc
		}
	case schema.Abandon:
		if cs.flags&fAnchor != 0 {
			q := qi
			if q < 0 {
				q = cs.pendQ
			}
			if q < 0 {
				q = a.queues.get("")
			}
			a.wait(q, at-cs.anchor, true)
			cs.flags &^= fAnchor
		}
	case schema.Departure:
		cs.last = max(cs.last, at)
		a.close(&cs, cs.last)
		delete(a.open, k)
		a.maybeSweep(at)
		return
	}
	cs.last = max(cs.last, at)
	a.open[k] = cs
	a.maybeSweep(at)
}

// wait records a wait of d µs in queue q that ended in a start (served) or
// an abandonment.
func (a *Accumulator) wait(q int32, d int64, abandoned bool) {
	g := a.queues.list[q]
	if d < 0 {
		g.negative++
		return
	}
	if abandoned {
		g.abandoned.add(d, a.cap)
		return
	}
	g.served.add(d, a.cap)
	for i, t := range a.thr {
		if d > t {
			g.over[i]++
		}
	}
}

// close ends a case at end: its stay and its interval in system.
func (a *Accumulator) close(cs *caseState, end int64) {
	a.los.add(end-cs.first, a.cap)
	a.occAdd(cs.first, true)
	a.occAdd(end, false)
}

func (a *Accumulator) occAdd(t int64, arrival bool) {
	b := floorDiv(t, a.res)
	o := a.occ[b]
	if o == nil {
		o = &occBucket{}
		a.occ[b] = o
	}
	rest := (b+1)*a.res - t
	if arrival {
		o.arr++
		o.arrRest += rest
	} else {
		o.dep++
		o.depRest += rest
	}
}

func (a *Accumulator) maybeSweep(now int64) {
	a.sinceSweep++
	if a.sinceSweep < sweepEvery {
		return
	}
	a.sinceSweep = 0
	for k, cs := range a.open {
		if now-cs.last > a.horizon {
			a.close(&cs, cs.last)
			delete(a.open, k)
		}
	}
}

// finish closes every open case at its last event and records the local
// days of the stretch of events observed since the last one ended.
func (a *Accumulator) finish() {
	for _, cs := range a.open {
		a.close(&cs, cs.last)
	}
	clear(a.open)
	a.lastRes = ""
	a.endStretch()
}

// observationGap is ObservationGap in µs.
const observationGap = int64(ObservationGap / time.Microsecond)

// endStretch records the local days of the current stretch of events as
// observed.
func (a *Accumulator) endStretch() {
	if !a.segHas {
		return
	}
	_, d0 := a.local(a.segFirst)
	_, d1 := a.local(a.segLast)
	a.days.add(dayRange{d0, d1})
	a.segHas = false
}

// local returns the hour of the week (0 = Monday 00:00-01:00 local) and
// the local day number (days since 1970-01-01 local) of at (µs).
func (a *Accumulator) local(at int64) (how int, day int32) {
	sec := floorDiv(at, 1e6)
	if sec < a.zoneLo || sec >= a.zoneHi {
		t := time.Unix(sec, 0).In(a.loc)
		_, off := t.Zone()
		lo, hi := t.ZoneBounds()
		a.zoneOff, a.zoneLo, a.zoneHi = int64(off), math.MinInt64, math.MaxInt64
		if !lo.IsZero() {
			a.zoneLo = lo.Unix()
		}
		if !hi.IsZero() {
			a.zoneHi = hi.Unix()
		}
	}
	ls := sec + a.zoneOff
	d := floorDiv(ls, 86400)
	return int((d+3)%7+7)%7*24 + int((ls-d*86400)/3600), int32(d)
}

func floorDiv(a, b int64) int64 {
	q := a / b
	if (a%b != 0) && ((a < 0) != (b < 0)) {
		q--
	}
	return q
}
