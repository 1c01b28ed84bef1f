package quality

import (
	"hash/maphash"
	"math"
	"math/bits"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Defaults applied by [NewAccumulator] to zero [Options] fields.
const (
	DefaultMaxSamples       = 5
	DefaultMaxCase          = 30 * 24 * time.Hour
	DefaultMaxService       = 24 * time.Hour
	DefaultResourceCapacity = 1
	DefaultClockTolerance   = 5 * time.Minute
	DefaultEventIDWindow    = 24 * time.Hour
	DefaultLittleTolerance  = 0.10
	DefaultGapMinMean       = 5.0
	DefaultGapMinWeeks      = 3
	DefaultStaleAfter       = 7 * 24 * time.Hour
	// DefaultMaxHours is how many hours the hourly series of one site
	// for the gap check holds, over all its runs (two years).
	DefaultMaxHours = 2 * 366 * 24
	// DefaultMaxEventIDSlots bounds the duplicate event_id check's table:
	// 4,194,304 slots of 16 bytes (64 MiB), which hold the ids of a window
	// until about 2.9 million of them are in it at once (see
	// Options.MaxEventIDSlots).
	DefaultMaxEventIDSlots = 1 << 22
)

// MaxSites caps the sites told apart; events of further sites are counted
// together under the site name [OtherSite].
const MaxSites = 256

// OtherSite is the site name under which events of sites beyond the
// 256th are counted.
const OtherSite = "(other)"

// maxKeys caps the (queue, activity) pairs and the resources told apart.
const maxKeys = 1 << 16

// maxKeyBytes caps the bytes of the names each of those tables holds
// (activities, (queue, activity) pairs, resources): long free text in a
// code column would otherwise hold 65,536 names of any length. Names of
// 64 bytes reach it at 65,536.
const maxKeyBytes = 4 << 20

// keyRoom reports whether a table of n names of size bytes in all may
// take one more of b bytes.
func keyRoom(n, size, b int) bool { return n < maxKeys && size+b <= maxKeyBytes }

// waitBeyond is the wait index of the pairs beyond maxKeys: their waits
// are counted together (Accumulator.waitsBeyond).
const waitBeyond = maxKeys

// defaultPruneEvery is the least number of events between two sweeps of
// expired records (event ids beyond their window, open services beyond
// the longest service); a sweep also waits for as many events as the last
// sweep kept records, so its cost per event stays constant.
const defaultPruneEvery = 1 << 16

// Options tune an [Accumulator]. The zero value checks nothing against
// the calendar and uses the defaults.
type Options struct {
	// UploadedAt is when the upload arrived; events later than it are
	// "in the future" and the lag is measured to it. Zero disables both.
	UploadedAt time.Time
	// WindowFrom and WindowTo are the dataset's declared period, the
	// half-open interval [WindowFrom, WindowTo); a zero bound is open.
	WindowFrom, WindowTo time.Time
	// MappedFields lists the schema fields the mapping profile fills. The
	// completeness score averages the optional fields among them; when
	// empty, it averages the optional fields that hold a value in at
	// least one accepted row (see SCORING.md).
	MappedFields []schema.Field
	// Zone is the dataset's local clock, in which the resolution grid,
	// the heaping and the hour-of-week of the gap check are judged; nil
	// means UTC.
	Zone *time.Location
	// MaxCase is the longest plausible case, first to latest event.
	// Default [DefaultMaxCase].
	MaxCase time.Duration
	// MaxService is the longest plausible service step (start to
	// complete), by activity; the key "" is the default for activities
	// not listed, itself [DefaultMaxService] when absent.
	MaxService map[string]time.Duration
	// ResourceCapacity is how many cases one resource may serve at once.
	// Default [DefaultResourceCapacity].
	ResourceCapacity int
	// Capacity holds capacities by the queue a service starts from and by
	// resource (pseudonym), before ResourceCapacity (schema.Capacity.Of).
	Capacity *schema.Capacity
	// ClockTolerance is how far a site's time may step back between two
	// consecutive rows in file order before the clock counts as going
	// backwards. Default [DefaultClockTolerance].
	ClockTolerance time.Duration
	// EventIDWindow is how far apart in time two events may be and still
	// be found sharing an event_id. Default [DefaultEventIDWindow].
	EventIDWindow time.Duration
	// MaxEventIDSlots bounds the memory of the event_id check: its table
	// holds at most this many slots of 16 bytes (rounded down to a power
	// of two, at least 1,024). Where the window holds more ids than about
	// 11/16 of them, the check drops the ids seen longest ago first and
	// looks back less than EventIDWindow from then on; the report says
	// so (Settings.EventIDBound). Default [DefaultMaxEventIDSlots].
	MaxEventIDSlots int
	// LittleTolerance is how far L / (λ·W) may stray from 1 before
	// Little's law counts as violated. Default [DefaultLittleTolerance].
	LittleTolerance float64
	// GapMinMean and GapMinWeeks: an hour (day) with no events is a gap
	// when its hour of week (day of week) was observed at least
	// GapMinWeeks times with a mean of at least GapMinMean events.
	GapMinMean  float64
	GapMinWeeks int
	// StaleAfter: a site whose newest event is older than this before
	// UploadedAt is stale. Default [DefaultStaleAfter].
	StaleAfter time.Duration
	// MaxHours is how many hours the gap series of one site holds over
	// all its runs.
	// Default [DefaultMaxHours].
	MaxHours int
	// Historical marks a dataset of past events, not a live feed: it is
	// not scored on currentness (no staleness, no gap checks).
	Historical bool
	// Terminal are the event types, besides departure and abandon, that
	// end a case's presence (schema.Profile.Terminal; see cases.Exits).
	Terminal []schema.EventType
	// MaxSamples is how many sample locations each finding keeps.
	// Default [DefaultMaxSamples].
	MaxSamples int
	// CopiesDropped says that the caller drops every event equal in every
	// field to an earlier one of the stream before Observe, and counts
	// those copies itself (as an upload's held-event filter does): the
	// accumulator does not look for exact duplicates, which it could not
	// find, and saves holding and hashing each instant's events.
	CopiesDropped bool
}

// defaultTo sets *p to d when *p is not positive (unset).
func defaultTo[T int | int64 | float64 | time.Duration](p *T, d T) {
	if *p <= 0 {
		*p = d
	}
}

func (o *Options) defaults() {
	defaultTo(&o.MaxCase, DefaultMaxCase)
	defaultTo(&o.ResourceCapacity, DefaultResourceCapacity)
	defaultTo(&o.ClockTolerance, DefaultClockTolerance)
	defaultTo(&o.EventIDWindow, DefaultEventIDWindow)
	defaultTo(&o.LittleTolerance, DefaultLittleTolerance)
	defaultTo(&o.GapMinMean, DefaultGapMinMean)
	defaultTo(&o.GapMinWeeks, DefaultGapMinWeeks)
	defaultTo(&o.StaleAfter, DefaultStaleAfter)
	defaultTo(&o.MaxHours, DefaultMaxHours)
	defaultTo(&o.MaxSamples, DefaultMaxSamples)
	defaultTo(&o.MaxEventIDSlots, DefaultMaxEventIDSlots)
	if o.Zone == nil {
		o.Zone = time.UTC
	}
}

// Accumulator gathers the quality counts of one upload. It is not safe
// for concurrent use.
//
// Protocol: [Accumulator.Reject] for each rejected row and
// [Accumulator.ObserveFileOrder] for each accepted event, both in file
// order; then [Accumulator.Observe] for each accepted event in
// non-decreasing OccurredAt order (the time pass), which returns the
// event's [Flags]; then the per-case pass: the same events grouped by case
// and in time order within each case, through a [cases.Builder] with the
// accumulator as an observer ([Accumulator.Event] takes each event with
// its flags packed into Line by [PackLine]); then [Accumulator.Report].
// [Accumulator.ObserveSorted] does both passes for events held in memory.
// An event given to Observe earlier than its predecessor is counted as
// the internal "order_breach" finding and skips the checks that need
// order.
//
// Instants are compared at microsecond precision, the precision of the
// snapshots.
type Accumulator struct {
	opt            Options
	uploadAt       int64
	fromAt, toAt   int64
	hasUpload      bool
	hasFrom, hasTo bool
	maxCase        uint64
	maxService     int64
	maxServiceAct  map[string]int64
	learned        []learnedBound // by activity, for lost starts
	resPeak        int            // most services one resource held at once
	capPeaks       map[capKey]int // the same, per declared queue or resource
	learnedIndex   map[string]int32
	clockTol       int64
	pruneEvery     int
	seed           maphash.Seed
	rejected       int64
	reasons        map[schema.Reason]*rejFinding
	samples        [numCodes][]Sample
	emptySamples   [numFields][]Sample
	sites          []*siteAcc
	siteIndex      map[string]int
	siteCache      [4]*siteAcc
	siteNext       int
	waits          []waitAcc
	waitIndex      map[waitKey]int32
	waitCache      int32 // index+1 of the last (queue, activity) looked up
	// the bytes of the names in learned, waits and resources (keyRoom)
	learnedBytes, waitBytes, resBytes int
	// waitsBeyond counts the waits of pairs beyond the cap, not told
	// apart (index waitBeyond).
	waitsBeyond    waitAcc
	resources      []resAcc
	resIndex       map[string]int32
	zLo, zHi, zOff int64 // the zone offset (µs) valid in [zLo, zHi)
	zKnown         bool

	// stream state
	seen                  bool
	curAt                 int64
	inst                  instantSet
	base                  int64 // the first instant
	ids                   table
	sinceIDPrune, keptIDs int
	svc                   map[uint64]openService // open services at a resource, by case
	sinceSvcPrune         int

	// per-case pass state: the case in hand
	cur caseState
	// ordCase is the case of the latest event of the per-case pass and
	// ord that event's position in it (from 0).
	ordCase []byte
	ord     int64
}

// openService is a service interval open at a resource.
type openService struct {
	res int32
	act int32 // index into a.learned, -1 beyond the cap
	at  int64 // µs
}

// learnedBound is what the time pass learns of one activity's services
// (start to the case's next complete): how many it measured and the
// longest. An open service of the activity is taken as lost (its complete
// never came) once it is open longer than lostFactor times the longest
// measured, when at least lostMinServices were measured; before that, or
// beyond the configured maximum, at the maximum (SCORING.md).
type learnedBound struct {
	n   int64
	max int64 // µs
}

const (
	lostFactor      = 2
	lostMinServices = 20
)

// lostAfter is how long a start of activity index act may stay open
// before it is taken as lost.
func (a *Accumulator) lostAfter(act int32) int64 {
	if act >= 0 {
		if l := a.learned[act]; l.n >= lostMinServices {
			return min(a.maxService, lostFactor*max(l.max, 1))
		}
	}
	return a.maxService
}

// activityIndex returns the index of activity name in a.learned, or -1
// beyond the cap.
func (a *Accumulator) activityIndex(name string) int32 {
	i, ok := a.learnedIndex[name]
	if !ok {
		if !keyRoom(len(a.learned), a.learnedBytes, len(name)) {
			return -1
		}
		a.learnedBytes += len(name)
		i = int32(len(a.learned))
		a.learned = append(a.learned, learnedBound{})
		a.learnedIndex[strings.Clone(name)] = i
	}
	return i
}

// rejFinding is a rejection count with its first samples.
type rejFinding struct {
	n       int64
	samples []Sample
}

// Finding codes counted per site, in report order within each dimension.
const (
	cLaterThanUpload = iota
	cOutsideWindow
	cClockBackwards
	cStartBeforeArrival
	cCompleteBeforeStart
	cDepartureBeforeArrival
	cAfterDeparture
	cCaseTooLong
	cServiceTooLong
	cSameInstantOrder
	cSameInstant
	cResourceOverlap
	cSiteChange
	cCensusNegative
	cExactDuplicate
	cDuplicateEventID
	cDuplicateCaseTypeTime
	cDuplicateAcrossFiles
	cWaitNoEnqueue
	cWaitNoStart
	cOrderBreach
	numCodes
)

var codeNames = [numCodes]string{
	CodeLaterThanUpload, CodeOutsideWindow, CodeClockBackwards, CodeStartBeforeArrival,
	CodeCompleteBeforeStart, CodeDepartureBeforeArrival, CodeActivityAfterDeparture,
	CodeCaseTooLong, CodeServiceTooLong, CodeSameInstantOrder, CodeSameInstant,
	CodeResourceOverlap, CodeSiteChangeWithoutTransfer, CodeCensusNegative,
	CodeExactDuplicate, CodeDuplicateEventID, CodeDuplicateCaseTypeTime,
	CodeDuplicateAcrossFiles, CodeWaitNoEnqueue, CodeWaitNoStart, CodeOrderBreach,
}

// Resolution grids, finest first.
const (
	gMilli = iota
	gSecond
	gMinute
	g5Minute
	g15Minute
	gHour
	gDay
	numGrids
)

var gridNames = [numGrids]string{"millisecond", "second", "minute", "5_minutes", "15_minutes", "hour", "day"}
var gridMicros = [numGrids]int64{1e3, 1e6, 60e6, 300e6, 900e6, 3600e6, 86400e6}

// Event-type positions in schema.EventTypes order.
const (
	tArrival = iota
	tEnqueue
	tStart
	tComplete
	tAbandon
	tTransfer
	tDeparture
	numTypes
)

func typeIndex(t schema.EventType) int {
	switch t {
	case schema.Arrival:
		return tArrival
	case schema.Enqueue:
		return tEnqueue
	case schema.Start:
		return tStart
	case schema.Complete:
		return tComplete
	case schema.Abandon:
		return tAbandon
	case schema.Transfer:
		return tTransfer
	case schema.Departure:
		return tDeparture
	}
	return tTransfer // not reached for accepted events
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
	fInstanceID
	numFields
)

const lagBuckets = 8 * 64

// siteAcc holds the counts of one site.
type siteAcc struct {
	name         string
	idx          int
	events       int64
	n            [numCodes]int64
	accRows      int64 // rows with an accuracy problem found in time order
	conRows      int64
	uniRows      int64
	nonEmpty     [numFields]int64
	byType       [numTypes]int64
	typeNonEmpty [numTypes][numFields]int64
	grid         [numGrids]int64
	clock        *ClockTimes // one clock time of day for every event?
	// stage coverage of the case records still held is added at report time
	stages stageCounts
	cases  caseSums
	// the first event of the site in the per-case pass: its case and its
	// position in the case, so that merged states list sites as one pass
	// does (see Accumulator.Merge)
	firstCase string
	firstOrd  int64
	// census and Little's law
	hasAt     bool
	firstAt   int64 // µs, absolute
	lastAt    int64
	area      u128  // case·µs of closed stays
	openN     int64 // cases still in the system at their last event
	openEntry u128  // Σ of their entry instants, each shifted by instantShift (µs)
	arrivals  int64
	entries   int64 // stays begun
	exits     int64 // stays ended by an exit
	stayed    u128  // µs of stays, an open one to its case's last event
	// lag to the upload
	lag    [lagBuckets]int64
	lagMax int64 // seconds
	lagN   int64
	// hourly series, in runs
	hours hourAcc
	// file order
	fileSeen  bool
	fileLast  int64
	fileRows  int64
	fileJumps int64
}

// stageCounts counts cases and those with each stage.
type stageCounts struct {
	cases, arrival, start, complete, departure int64
}

type waitKey struct{ queue, activity string }

type waitAcc struct {
	key                       waitKey
	waits, noEnqueue, noStart int64
}

// add adds o's counts to w.
func (w *waitAcc) add(o *waitAcc) {
	w.waits += o.waits
	w.noEnqueue += o.noEnqueue
	w.noStart += o.noStart
}

type resAcc struct {
	open []openInterval
}

// capKey names a declared capacity: a queue, or a resource pseudonym.
type capKey struct {
	resource bool
	name     string
}

type openInterval struct {
	caseKey uint64
	at      int64 // µs
	act     int32 // activity index: its learned bound (see learnedBound)
}

// NewAccumulator returns an empty accumulator for one upload.
func NewAccumulator(opt Options) *Accumulator {
	opt.defaults()
	a := &Accumulator{
		opt:          opt,
		maxCase:      uint64(opt.MaxCase.Microseconds()),
		maxService:   DefaultMaxService.Microseconds(),
		learnedIndex: map[string]int32{},
		clockTol:     opt.ClockTolerance.Microseconds(),
		pruneEvery:   defaultPruneEvery,
		seed:         maphash.MakeSeed(),
		reasons:      make(map[schema.Reason]*rejFinding),
		siteIndex:    make(map[string]int),
		waitIndex:    make(map[waitKey]int32),
		resIndex:     make(map[string]int32),
		ids:          newTable(uint64(opt.EventIDWindow.Microseconds()), shardBound(opt.MaxEventIDSlots)),
		svc:          map[uint64]openService{},
	}
	for act, d := range opt.MaxService {
		if act == "" {
			a.maxService = d.Microseconds()
			continue
		}
		if a.maxServiceAct == nil {
			a.maxServiceAct = map[string]int64{}
		}
		a.maxServiceAct[act] = d.Microseconds()
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

// flag counts one finding of code c at site s, keeping a sample of e.
func (a *Accumulator) flag(s *siteAcc, c int, e *schema.Event) {
	s.n[c]++
	a.samples[c] = keepFirstLines(a.samples[c], a.opt.MaxSamples, e)
}

// keepFirstLines keeps, of the samples of one finding, those of the
// lowest source lines (ties: lowest case pseudonym), so that samples do
// not depend on the order the passes see events in (time order, or case
// order by pseudonym) and point a partner at the top of the file first.
// Events without a line (read back from stored files) come after every
// line, one sample per case (sampleLine).
func keepFirstLines(smp []Sample, max int, e *schema.Event) []Sample {
	el := sampleLine(e.Line)
	less := func(x *Sample) bool {
		xl := sampleLine(x.Line)
		return el < xl || el == xl && e.CaseID < x.CaseID
	}
	i := len(smp)
	for i > 0 && less(&smp[i-1]) {
		i--
	}
	if i > 0 && smp[i-1].Line == e.Line && smp[i-1].CaseID == e.CaseID {
		return smp // a case's other event without a line
	}
	if i >= max {
		return smp
	}
	if len(smp) < max {
		smp = append(smp, Sample{})
	}
	copy(smp[i+1:], smp[i:len(smp)-1])
	smp[i] = Sample{Line: e.Line, CaseID: strings.Clone(e.CaseID)}
	return smp
}

// sampleLine is the rank of a sample's line: the line, or after every
// line for none (0): a line in the partner's file is what a sample is
// for, a case pseudonym alone they cannot look up.
func sampleLine(l int64) int64 {
	if l <= 0 {
		return math.MaxInt64
	}
	return l
}

// site returns the counters of site name.
func (a *Accumulator) site(name string) *siteAcc {
	// Files hold one or a few sites: a tiny cache spares most map lookups.
	for _, s := range a.siteCache {
		if s != nil && s.name == name {
			return s
		}
	}
	i, ok := a.siteIndex[name]
	if !ok {
		if len(a.sites) >= MaxSites {
			name = OtherSite
			i, ok = a.siteIndex[name]
		}
		if !ok {
			i = len(a.sites)
			name = strings.Clone(name) // do not pin the caller's buffers
			a.sites = append(a.sites, &siteAcc{name: name, idx: i})
			a.siteIndex[name] = i
		}
	}
	s := a.sites[i]
	a.siteCache[a.siteNext] = s
	a.siteNext = (a.siteNext + 1) % len(a.siteCache)
	return s
}

// Reject counts one rejected source row. Its line, column, field, reason,
// message and offending text are kept for the first MaxSamples of each
// reason; the text only for a non-identifier field (schema.Rejection
// leaves it empty otherwise; checked again here).
func (a *Accumulator) Reject(r schema.Rejection) {
	a.rejected++
	f := a.reasons[r.Reason]
	if f == nil {
		f = new(rejFinding)
		a.reasons[r.Reason] = f
	}
	f.n++
	if len(f.samples) < a.opt.MaxSamples {
		s := Sample{Line: r.Line, Column: r.Column, Field: r.Field, Message: r.Message}
		if r.Field != "" && !r.Field.Identifier() {
			s.Text = r.Text
		}
		f.samples = append(f.samples, s)
	}
}

// ObserveFileOrder sees one accepted event in file order, before the
// sorted [Accumulator.Observe] pass; it checks only that each site's
// clock does not step back by more than Options.ClockTolerance between
// consecutive rows of that site. e may be reused once it returns.
func (a *Accumulator) ObserveFileOrder(e *schema.Event) {
	s := a.site(e.Site)
	at := e.OccurredAt.UnixMicro()
	s.fileRows++
	if s.fileSeen && at < s.fileLast-a.clockTol {
		s.fileJumps++
		if len(a.samples[cClockBackwards]) < a.opt.MaxSamples {
			a.samples[cClockBackwards] = append(a.samples[cClockBackwards], Sample{Line: e.Line, CaseID: strings.Clone(e.CaseID)})
		}
	}
	s.fileSeen, s.fileLast = true, at
}

// Observe counts one accepted event in the time pass and returns what it
// found, for the per-case pass (see the protocol on [Accumulator]). e may
// be reused once Observe returns.
func (a *Accumulator) Observe(e *schema.Event) Flags {
	if e == nil {
		return 0
	}
	s := a.site(e.Site)
	s.events++
	ti := typeIndex(e.Type)
	a.countFields(s, ti, e)
	at := e.OccurredAt.UnixMicro()

	var fl Flags
	if a.hasUpload {
		if at > a.uploadAt {
			a.flag(s, cLaterThanUpload, e)
			fl |= FlagAccuracy | FlagLater
		} else {
			lagS := (a.uploadAt - at) / 1e6
			s.lag[lagBucket(lagS)]++
			s.lagN++
			if lagS > s.lagMax {
				s.lagMax = lagS
			}
		}
	}
	if (a.hasFrom && at < a.fromAt) || (a.hasTo && at >= a.toAt) {
		a.flag(s, cOutsideWindow, e)
		fl |= FlagAccuracy | FlagOutsideWindow
	}
	a.countGrid(s, e, at)

	if a.seen && at < a.curAt {
		a.flag(s, cOrderBreach, e)
		return fl
	}
	if !a.seen {
		a.base = at
	}
	if !a.seen || at > a.curAt {
		a.inst.reset()
		a.curAt, a.seen = at, true
	}
	a.countHour(s, at)
	a.census(s, at)

	exact := !a.opt.CopiesDropped && a.inst.add(e, a.seed)
	if exact {
		a.flag(s, cExactDuplicate, e)
		fl |= FlagUniqueness | FlagCopy
	}
	rel := uint64(at - a.base)
	if e.EventID != "" && !exact && a.duplicateID(e, rel) {
		a.flag(s, cDuplicateEventID, e)
		fl |= FlagUniqueness
	}
	if !exact && a.resourceCheck(s, ti, e, at) {
		fl |= FlagConsistency
	}
	a.sinceIDPrune++
	if a.sinceIDPrune >= a.pruneEvery && a.sinceIDPrune >= a.keptIDs {
		a.sinceIDPrune = 0
		a.ids.expire(rel)
		a.keptIDs = a.ids.n
	}
	return fl
}

// EndTimePass frees what only the time pass needs, the event ids of its
// duplicate check (up to MaxEventIDSlots of 16 bytes), once the last
// event has been observed: the per-case pass and the report do not need
// them, and the upload's commit then has that memory. An event observed
// after it is checked against no earlier event id.
func (a *Accumulator) EndTimePass() {
	a.ids.release()
	a.keptIDs = 0
}

// resourceCheck follows the service intervals open at each resource, in
// time order across cases, and reports whether e's start finds its
// resource already serving as many cases as its capacity. A start opens
// an interval for its case (closing the case's previous one); the case's
// next complete or departure closes it. Intervals open for longer than
// the default service maximum are taken as lost completes and dropped,
// so what is held is bounded by the services in progress.
func (a *Accumulator) resourceCheck(s *siteAcc, ti int, e *schema.Event, at int64) bool {
	if ti != tStart && ti != tComplete {
		return false
	}
	// A service is keyed by its case and activity instance, or without
	// one by its case and activity: parallel activities of one case (a
	// test during an assessment), and parallel executions of one activity
	// where the log names instances, pair apart, as the per-case
	// computation pairs them (cases.Builder).
	var h maphash.Hash
	h.SetSeed(a.seed)
	h.WriteString(e.CaseID)
	h.WriteByte(0)
	if e.InstanceID != "" {
		h.WriteByte(1)
		h.WriteString(e.InstanceID)
	} else {
		h.WriteString(e.Activity)
	}
	k := nonZero(h.Sum64())
	if o, ok := a.svc[k]; ok {
		a.closeInterval(o.res, k)
		delete(a.svc, k)
		if ti == tComplete && o.act >= 0 && at >= o.at {
			l := &a.learned[o.act]
			l.n++
			l.max = max(l.max, at-o.at)
		}
	}
	over := false
	if ti == tStart && e.ResourceID != "" {
		if r := a.resource(e.ResourceID); r >= 0 {
			act := a.activityIndex(e.Activity)
			if a.openInterval(r, k, at, act, e) {
				a.flag(s, cResourceOverlap, e)
				over = true
			}
			a.svc[k] = openService{res: r, act: act, at: at}
		}
	}
	a.sinceSvcPrune++
	if a.sinceSvcPrune >= a.pruneEvery && a.sinceSvcPrune >= len(a.svc) {
		a.sinceSvcPrune = 0
		for k, o := range a.svc {
			if at-o.at > a.maxService {
				a.closeInterval(o.res, k)
				delete(a.svc, k)
			}
		}
	}
	return over
}

// resource returns the index of resource id, or -1 beyond the cap.
func (a *Accumulator) resource(id string) int32 {
	i, ok := a.resIndex[id]
	if !ok {
		if !keyRoom(len(a.resources), a.resBytes, len(id)) {
			return -1
		}
		a.resBytes += len(id)
		i = int32(len(a.resources))
		a.resources = append(a.resources, resAcc{})
		a.resIndex[strings.Clone(id)] = i
	}
	return i
}

// openInterval opens a service interval of case k at resource r for the
// start e and reports whether the resource is then serving more cases
// than its capacity: its own, else that of the queue e starts from, else
// the default (Options.Capacity, Options.ResourceCapacity). Intervals
// open for longer than the default service maximum are taken as lost
// completes and no longer count.
func (a *Accumulator) openInterval(r int32, k uint64, at int64, act int32, e *schema.Event) bool {
	res := &a.resources[r]
	kept := res.open[:0]
	for _, iv := range res.open {
		if at-iv.at <= a.lostAfter(iv.act) {
			kept = append(kept, iv)
		}
	}
	over := len(kept) >= a.opt.Capacity.Of(e.ResourceID, e.Queue, a.opt.ResourceCapacity)
	res.open = append(kept, openInterval{caseKey: k, at: at, act: act})
	n := len(res.open)
	a.resPeak = max(a.resPeak, n)
	if c := a.opt.Capacity; c != nil {
		if _, ok := c.Resources[e.ResourceID]; ok {
			a.capPeak(capKey{true, e.ResourceID}, n)
		} else if _, ok := c.Queues[e.Queue]; ok {
			a.capPeak(capKey{false, e.Queue}, n)
		}
	}
	return over
}

// capPeak records n services held at once under declared capacity k.
func (a *Accumulator) capPeak(k capKey, n int) {
	if a.capPeaks == nil {
		a.capPeaks = map[capKey]int{}
	}
	if n > a.capPeaks[k] {
		if _, ok := a.capPeaks[k]; !ok {
			k.name = strings.Clone(k.name)
		}
		a.capPeaks[k] = n
	}
}

// closeInterval ends the open service interval of case k at resource r,
// if the resource still holds it.
func (a *Accumulator) closeInterval(r int32, k uint64) {
	res := &a.resources[r]
	for i, iv := range res.open {
		if iv.caseKey == k {
			res.open = append(res.open[:i], res.open[i+1:]...)
			break
		}
	}
}

func (a *Accumulator) countFields(s *siteAcc, ti int, e *schema.Event) {
	s.byType[ti]++
	tn := &s.typeNonEmpty[ti]
	// Required fields are always set in accepted events.
	for _, i := range [...]int{fSite, fCaseID, fEventType, fOccurredAt} {
		s.nonEmpty[i]++
		tn[i]++
	}
	a.optional(s, tn, fSubjectID, e.SubjectID, e)
	a.optional(s, tn, fResourceID, e.ResourceID, e)
	a.optional(s, tn, fActivity, e.Activity, e)
	a.optional(s, tn, fQueue, e.Queue, e)
	a.optional(s, tn, fPriority, e.Priority, e)
	a.optional(s, tn, fChannel, e.Channel, e)
	a.optional(s, tn, fOutcome, e.Outcome, e)
	a.optional(s, tn, fEventID, e.EventID, e)
	a.optional(s, tn, fInstanceID, e.InstanceID, e)
}

func (a *Accumulator) optional(s *siteAcc, tn *[numFields]int64, i int, v string, e *schema.Event) {
	if v != "" {
		s.nonEmpty[i]++
		tn[i]++
	} else if len(a.emptySamples[i]) < a.opt.MaxSamples && applies(schema.Fields[i], e.Type) {
		a.emptySamples[i] = append(a.emptySamples[i], Sample{Line: e.Line, CaseID: strings.Clone(e.CaseID)})
	}
}

// countGrid counts the grids e's local wall-clock time sits on.
func (a *Accumulator) countGrid(s *siteAcc, e *schema.Event, at int64) {
	if !a.zKnown || at < a.zLo || at >= a.zHi {
		t := e.OccurredAt.In(a.opt.Zone)
		_, off := t.Zone()
		lo, hi := t.ZoneBounds()
		a.zOff, a.zLo, a.zHi, a.zKnown = int64(off)*1e6, minInt64, maxInt64, true
		if !lo.IsZero() {
			a.zLo = lo.UnixMicro()
		}
		if !hi.IsZero() {
			a.zHi = hi.UnixMicro()
		}
	}
	local := at + a.zOff
	const day = 86400e6
	zt, ut := local-floorDiv(local, day)*day, at-floorDiv(at, day)*day
	if c := s.clock; c == nil {
		s.clock = &ClockTimes{Zone: zt, ZoneSame: true, UTC: ut, UTCSame: true}
	} else {
		c.ZoneSame = c.ZoneSame && c.Zone == zt
		c.UTCSame = c.UTCSame && c.UTC == ut
	}
	for g := range numGrids {
		if local%gridMicros[g] != 0 {
			return
		}
		s.grid[g]++
	}
}

const (
	minInt64 = -1 << 63
	maxInt64 = 1<<63 - 1
)

// lagBucket maps a lag in seconds to its bucket: exact below 8 s, then 8
// buckets per doubling.
func lagBucket(s int64) int {
	if s < 8 {
		return int(max(s, 0))
	}
	oct := bits.Len64(uint64(s)) - 1
	return oct*8 + int(s>>(oct-3))&7
}

// lagBounds is the range [lo, hi) of seconds of bucket b.
func lagBounds(b int) (lo, hi int64) {
	if b < 8 {
		return int64(b), int64(b) + 1
	}
	oct, m := b/8, int64(b%8)
	return (8 + m) << (oct - 3), (9 + m) << (oct - 3)
}

// countHour adds the event to its site's hourly series.
func (a *Accumulator) countHour(s *siteAcc, at int64) {
	s.hours.add(floorDiv(at, 3600e6), a.opt.MaxHours)
}

func floorDiv(a, b int64) int64 {
	q := a / b
	if a%b != 0 && (a < 0) != (b < 0) {
		q--
	}
	return q
}

// census widens the site's observed span to at; the census area itself
// is summed per case in the per-case pass.
func (a *Accumulator) census(s *siteAcc, at int64) {
	if !s.hasAt {
		s.hasAt, s.firstAt, s.lastAt = true, at, at
		return
	}
	s.firstAt = min(s.firstAt, at)
	s.lastAt = max(s.lastAt, at)
}

// duplicateID reports whether e's event_id was seen within the window.
func (a *Accumulator) duplicateID(e *schema.Event, rel uint64) bool {
	k := nonZero(maphash.String(a.seed, e.EventID))
	sl, ok := a.ids.lookup(k, rel)
	if ok && !a.ids.expired(sl, rel) {
		sl.rec = rel
		return true
	}
	if !ok {
		a.ids.claim(sl, k)
	}
	sl.rec = rel
	return false
}
