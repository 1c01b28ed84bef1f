package summary

import (
	"math"
	"slices"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// Defaults applied by [New] to zero [Options] fields.
const (
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

// Options tune an [Accumulator]. The zero value uses UTC and the defaults.
// Accumulators merge only when their options agree.
type Options struct {
	// Location is the zone of the site's wall clock, for hours of the week
	// and days; nil means UTC.
	Location *time.Location
	// WaitThresholds are the waits whose exceedance shares are reported,
	// per queue. Default [DefaultWaitThresholds].
	WaitThresholds []time.Duration
	// Resolution is the width of the occupancy buckets, at least a second.
	// Default [DefaultResolution].
	Resolution time.Duration
	// ExactValues is the most distinct values a distribution keeps exactly
	// before it collapses to log buckets of relative error 0.5%.
	// Default [DefaultExactValues].
	ExactValues int
	// Terminal are the event types, besides departure and abandon, that
	// end a case's presence (schema.Profile.Terminal), for the per-case
	// computation of [Accumulator.ObserveAll]; catalog sets them on its
	// own case pass.
	Terminal []schema.EventType
}

// Accumulator gathers a summary in two parts. Event-level figures (event
// counts, types, time range, days observed, resources) come from
// [Accumulator.Observe], in any order. Case-level figures (cases,
// arrivals by hour, waits, services, length of stay, occupancy) come from
// the one per-case computation of [cases.Builder], for which the
// accumulator is a [cases.Observer]: each case is observed whole, once,
// however long it idled and however many files its events came in. It is
// not safe for concurrent use.
//
// Event-level parts merge ([Accumulator.Merge]); a version's summary is
// the merge of its files' event-level states plus one per-case pass over
// the whole version, so a case spanning two uploads counts once. Distinct
// counts are exact when the caller sets them ([Accumulator.SetCounts],
// as catalog does from its counts on disk); otherwise they are exact up to
// 4096 and HyperLogLog estimates beyond.
type Accumulator struct {
	opt Options
	loc *time.Location
	thr []int64 // µs
	res int64   // µs
	cap int

	events     uint64
	types      [7]uint64
	otherTypes uint64
	hasTime    bool
	minAt      int64
	maxAt      int64
	outOfOrder uint64

	cases, subjects, resources *distinct
	counted                    *Counts // exact counts set by the caller

	sites  groups[siteGroup]
	queues groups[queueGroup]
	acts   groups[activityGroup]

	arrivals uint64
	arrWeek  [168]uint64
	arrDay   map[int32]uint64
	days     observed // local days observed
	los      *dist
	evCase   *dist // events per case, as counts (not µs)
	between  *dist // time between consecutive events of a case
	prevCase string
	caseAt   int64 // the previous event of prevCase
	occ      map[int64]*occBucket
	census   census
	process  *ProcessObserver // process views, when a per-case pass computes them (see Process)

	// stream state of the current file
	prevAt   int64
	segHas   bool
	segFirst int64
	segLast  int64
	lastRes  string
	zoneLo   int64
	zoneHi   int64
	zoneOff  int64
}

// Counts are exact distinct counts of a summary's cases, subjects and
// resources, counted by the caller.
type Counts struct {
	Cases, Subjects, Resources uint64
	// Events the summary left out: dated later than their upload, outside
	// the dataset's window, exact copies of another event.
	LaterThanUpload, OutsideWindow, ExactDuplicates uint64
}

// SetProcess makes p a's process observer (see [Accumulator.Process]):
// its views are the summary's `process` member and part of a's state; p
// must observe the same per-case pass as a, and be made by a.NewProcess.
func (a *Accumulator) SetProcess(p *ProcessObserver) { a.process = p }

// SetCounts makes c the summary's distinct counts, marked exact.
func (a *Accumulator) SetCounts(c Counts) { a.counted = &c }

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

// census holds the sums of Little's law over whole cases (see
// cases.Record.Stays): exact integer sums, so states merge exactly.
// Instants are stored shifted by instantShift to stay unsigned.
type census struct {
	stays, exits, open uint64
	present            u128 // µs of the stays that ended by an exit
	openSince          u128 // Σ entry of the stays still open, shifted
	openLast           u128 // Σ last event of the cases holding them, shifted
}

const instantShift = 1 << 62

func (c *census) merge(o *census) {
	c.stays += o.stays
	c.exits += o.exits
	c.open += o.open
	c.present.merge(o.present)
	c.openSince.merge(o.openSince)
	c.openLast.merge(o.openLast)
}

// occBucket holds what happened in one occupancy bucket: arrivals and
// departures with their summed remaining time to the bucket's end (µs), so
// that the time-average of the number in system is exact.
type occBucket struct {
	arr, dep         uint64
	arrRest, depRest int64
}

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
	if opt.Resolution < time.Second {
		opt.Resolution = DefaultResolution
	}
	if opt.ExactValues <= 0 {
		opt.ExactValues = DefaultExactValues
	}
	a := &Accumulator{
		opt:       opt,
		loc:       opt.Location,
		res:       opt.Resolution.Microseconds(),
		cap:       opt.ExactValues,
		cases:     newDistinct(),
		subjects:  newDistinct(),
		resources: newDistinct(),
		arrDay:    map[int32]uint64{},
		los:       newDist(),
		evCase:    newDist(),
		between:   newDist(),
		occ:       map[int64]*occBucket{},
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

// Observe adds one event to the event-level figures. Events may come in
// any order; one earlier than its predecessor is counted (OutOfOrder). e
// may be reused once Observe returns.
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
	if e.Queue != "" {
		a.queues.list[a.queues.get(e.Queue)].events++
	}
	if e.Activity != "" {
		a.acts.list[a.acts.get(e.Activity)].events++
	}
	if e.ResourceID != "" && e.ResourceID != a.lastRes {
		a.resources.add(hashString(e.ResourceID))
		a.lastRes = e.ResourceID
	}
}

// Event is part of [cases.Observer]: it measures the time between
// consecutive events of a case (events are counted by Observe).
func (a *Accumulator) Event(e *schema.Event) {
	at := e.OccurredAt.UnixMicro()
	if a.prevCase != "" && e.CaseID == a.prevCase {
		if d := at - a.caseAt; d >= 0 {
			a.between.add(d, a.cap)
		}
	} else {
		a.prevCase = strings.Clone(e.CaseID)
	}
	a.caseAt = at
}

// Wait takes one wait of a case: the queue's arrival by hour of week, and
// the wait's duration when it ended in a start or an abandon.
func (a *Accumulator) Wait(w *cases.Wait) {
	q := a.queues.get(w.Queue)
	if w.Queue != "" {
		how, _ := a.local(w.At)
		a.queues.list[q].arr[how]++
	}
	if !w.Open {
		a.wait(q, w.Duration, w.Abandoned)
	}
}

// Service takes one measured service of a case.
func (a *Accumulator) Service(sv *cases.Service) {
	g := a.acts.list[a.acts.get(sv.Activity)]
	if sv.Duration < 0 {
		g.negative++
		return
	}
	g.svc.add(sv.Duration, a.cap)
	if sv.Queue != "" {
		q := a.queues.list[a.queues.get(sv.Queue)]
		q.svcN++
		q.svcSum.add(uint64(sv.Duration))
	}
}

// Case takes a finished case: its arrival (at its first event) by hour of
// week, day and site, its subject, its length of stay (first to last
// event) and its interval in system.
func (a *Accumulator) Case(r *cases.Record) {
	a.cases.add(hashString(r.CaseID))
	if r.SubjectID != "" {
		a.subjects.add(hashString(r.SubjectID))
	}
	how, day := a.local(r.First)
	a.arrivals++
	a.arrWeek[how]++
	a.arrDay[day]++
	a.sites.list[a.sites.get(r.Site)].arr[how]++
	a.los.add(r.Last-r.First, a.cap)
	a.evCase.add(r.Events, a.cap)
	a.prevCase = ""
	a.occAdd(r.First, true)
	a.occAdd(r.Last, false)
	c := &a.census
	c.stays += uint64(r.Stays)
	if r.Present > 0 {
		c.present.add(uint64(r.Present))
	}
	if r.OpenSince != nil {
		c.open++
		c.openSince.add(uint64(*r.OpenSince + instantShift))
		c.openLast.add(uint64(r.Last + instantShift))
		c.exits += uint64(r.Stays - 1)
	} else {
		c.exits += uint64(r.Stays)
	}
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

// finish ends the current file's stream state and records the local
// days of the stretch of events observed since the last one ended.
func (a *Accumulator) finish() {
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
	a.days.add(dayRange{first: d0, last: d1, from: a.segFirst, to: a.segLast})
	a.segHas = false
}

// exposure returns the hours of exposure behind each local hour of the
// week (0 = Monday 00:00-01:00): in each observed stretch (see
// ObservationGap), every real hour from the one holding its first event
// to the one holding its last counts once, for the local hour of week its
// start falls in; the silences between stretches count nowhere. So a
// partial first or last day counts its hours only, the hour a clock
// change skips counts nowhere and the one it repeats counts twice (for
// zones whose offsets are whole hours; in others each real hour is
// credited to the local hour its start falls in). The hours depend only
// on the stretches, not on how the events were cut into files, and
// neither the state nor this loop grows with the span: one far-dated event
// adds its own hour.
//
// The hours are counted a stretch of constant zone offset at a time, in
// closed form, so the work grows with the offset changes a stretch
// crosses, not with its hours: a state may hold stretches of centuries.
func (a *Accumulator) exposure() (total int, week [168]int) {
	a.endStretch()
	const hour = 3600 * usPerSec
	for _, r := range a.days {
		for h, last := floorDiv(r.from, hour), floorDiv(r.to, hour); h <= last; {
			t := time.Unix(h*3600, 0).In(a.loc)
			_, off := t.Zone()
			end := last
			if _, hi := t.ZoneBounds(); !hi.IsZero() {
				// the last hour that starts before the offset changes
				end = min(end, floorDiv(hi.Unix()+3599, 3600)-1)
			}
			// Past the zone's table the library's bounds of a leap
			// year's last day can end at t itself: count that hour alone.
			end = max(end, h)
			n := end - h + 1
			// local hour of week of real hour h: 1970-01-01 was a Thursday, 72 hours after a Monday's start
			how := int(((h+floorDiv(int64(off), 3600)+72)%168 + 168) % 168)
			for k := range week {
				week[k] += int(n / 168)
			}
			for i := range int(n % 168) {
				week[(how+i)%168]++
			}
			total += int(n)
			h = end + 1
		}
	}
	return total, week
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

// ObserveAll runs both parts over events held in memory, in any order:
// Observe for each, then the per-case computation in case order, with
// a's process observer ([Accumulator.Process]) beside a. It suits
// small inputs and tests; catalog streams the per-case pass through a
// sort on disk instead.
func (a *Accumulator) ObserveAll(evs []schema.Event) {
	for i := range evs {
		a.Observe(&evs[i])
	}
	idx := make([]int, len(evs))
	for i := range idx {
		idx[i] = i
	}
	slices.SortStableFunc(idx, func(i, j int) int { return cases.Less(&evs[i], &evs[j]) })
	b := cases.NewBuilder(a, a.Process())
	b.Terminal = a.opt.Terminal
	for _, i := range idx {
		b.Add(&evs[i])
	}
	b.Flush()
}
