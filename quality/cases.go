package quality

import (
	"slices"
	"strings"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// Flags are what the time-ordered pass ([Accumulator.Observe]) found about
// one event, handed on to the per-case pass so that a row is counted once
// per dimension whichever pass found its problem.
type Flags uint8

// Flags of one event.
const (
	FlagAccuracy Flags = 1 << iota
	FlagConsistency
	FlagUniqueness
	// FlagCopy marks an exact copy of an event at the same instant: it
	// changes no per-case state and is checked no further.
	FlagCopy
	// FlagLater marks an event dated later than its upload, and
	// FlagOutsideWindow one outside the dataset's declared window: both
	// are counted here and kept out of summaries.
	FlagLater
	FlagOutsideWindow
)

// Excluded are the flags of an event kept out of summaries.
const Excluded = FlagLater | FlagOutsideWindow

// lineBits is how many low bits of a packed line hold the line.
const lineBits = 56

// PackLine returns a source line with f in its top byte, the form in which
// the per-case pass takes an event's Line (see [Accumulator.Event]).
// Lines are below 2^56.
func PackLine(line int64, f Flags) int64 {
	return int64(uint64(line)&(1<<lineBits-1) | uint64(f)<<lineBits)
}

// UnpackLine is the inverse of [PackLine].
func UnpackLine(l int64) (int64, Flags) {
	return int64(uint64(l) & (1<<lineBits - 1)), Flags(uint64(l) >> lineBits)
}

// caseState is what the per-case checks keep of the case in hand: the
// per-case pass sees one case at a time, so there is one.
type caseState struct {
	id      string
	first   int64 // first event, µs
	rec     int64 // latest instant
	arr     int64 // the arrival that opened the current stay
	entry   int64 // when the case entered the census of its site
	start   int64 // the open start
	flags   uint32
	site    int   // site index of the latest event
	typesAt uint8 // event types seen at the latest instant
	wait    int32 // (queue, activity) index+1 of the pending enqueue
	// seenAt are the (type, activity, instance) seen at the latest
	// instant, up to maxSeenAt, for the duplicate check.
	seenAt []typeActivity
}

type typeActivity struct {
	ti                 int
	activity, instance string
	line               int64 // source line; 0 for an event read back from a stored file
}

// maxSeenAt bounds the (type, activity) pairs one instant of a case keeps.
const maxSeenAt = 64

// seen returns the earlier event of e's (type ti, activity, activity
// instance) at the latest instant, or nil after recording e: two starts
// of one activity at one instant are one event twice, unless they name
// different instances.
func (st *caseState) seen(ti int, e *schema.Event) *typeActivity {
	for i := range st.seenAt {
		if x := &st.seenAt[i]; x.ti == ti && x.activity == e.Activity && x.instance == e.InstanceID {
			return x
		}
	}
	if len(st.seenAt) < maxSeenAt {
		st.seenAt = append(st.seenAt, typeActivity{ti, strings.Clone(e.Activity), strings.Clone(e.InstanceID), e.Line})
	}
	return nil
}

// bounds reports whether e (of type index ti), at the latest instant,
// would bound one interval with an event seen there: a start and a
// complete bound a service only within one activity instance (the same
// activity, and the same instance_id where both name one; the complete of
// one step and the start of the next at one instant are a plain
// handover); the other pairs bound case-level intervals. Past maxSeenAt
// events it answers by type alone.
func (st *caseState) bounds(ti int, e *schema.Event) bool {
	if ti != tStart && ti != tComplete || len(st.seenAt) >= maxSeenAt {
		return true
	}
	for _, x := range st.seenAt {
		if conflicts[ti]&(1<<x.ti) != 0 && x.activity == e.Activity &&
			(x.instance == "" || e.InstanceID == "" || x.instance == e.InstanceID) {
			return true
		}
	}
	return false
}

const (
	csArr             uint32 = 1 << iota // stage coverage: an arrival was seen
	csStart                              // ... a start
	csComplete                           // ... a complete
	csDep                                // ... a departure
	csAnchored                           // an arrival or enqueue was seen
	csStarted                            // a start was seen
	csPendStart                          // a start came before any arrival or enqueue
	csPendStartNow                       // ... at the latest instant
	csPendComplete                       // a complete came before any start
	csPendCompleteNow                    // ... at the latest instant
	csPendDep                            // a departure came before any arrival
	csPendDepNow                         // ... at the latest instant
	csDeparted                           // departed, no arrival since
	csDepartedNow                        // ... at the latest instant
	csInSystem                           // counted in the census
	csImplicit                           // ... by its first event, not an arrival
	csStay                               // arr holds the arrival of the current stay
	csWaitPending                        // an enqueue waits for its start
	csWaitAnchor                         // an arrival since the last start
	csPrevTransfer                       // the latest event was a transfer
	csOpenStart                          // start holds a start not yet completed
	csExited                             // left the census by an abandon or a terminal type, no arrival since
	csNowFlags        = csPendStartNow | csPendCompleteNow | csPendDepNow | csDepartedNow
)

// conflicts[t] are the types that may not share an instant with type t
// in one case: each pair bounds one measured interval (service, stay,
// wait before abandoning), so an equal instant makes it zero and leaves
// the order of the two rows to chance.
var conflicts = [numTypes]uint8{
	tStart:     1 << tComplete,
	tComplete:  1 << tStart,
	tArrival:   1 << tDeparture,
	tDeparture: 1 << tArrival,
	tEnqueue:   1 << tAbandon,
	tAbandon:   1 << tEnqueue,
}

// Event is the per-case pass: it takes the accepted events grouped by case
// and in time order within each case (as catalog's case sort gives them),
// with Line packed by [PackLine] with the event's [Flags] from
// [Accumulator.Observe]. It runs the per-case checks, counts each row once
// per dimension, and keeps the census of each site as the sum of the
// cases' times in system. It makes Accumulator a [cases.Observer].
func (a *Accumulator) Event(e *schema.Event) {
	line, fl := UnpackLine(e.Line)
	ev := *e
	ev.Line = line
	if a.cur.id != "" && ev.CaseID != a.cur.id {
		a.endCase()
	}
	if string(a.ordCase) != ev.CaseID {
		a.ordCase, a.ord = append(a.ordCase[:0], ev.CaseID...), 0
	} else {
		a.ord++
	}
	n := len(a.sites)
	s := a.site(ev.Site)
	if len(a.sites) > n {
		s.firstCase, s.firstOrd = string(a.ordCase), a.ord
	}
	at := ev.OccurredAt.UnixMicro()
	a.census(s, at) // the span, when the time pass did not run
	var acc, con, uni bool
	if fl&FlagCopy == 0 {
		acc, con, uni = a.observeCase(s, typeIndex(ev.Type), &ev, at)
	}
	if acc || fl&FlagAccuracy != 0 {
		s.accRows++
	}
	if con || fl&FlagConsistency != 0 {
		s.conRows++
	}
	if uni || fl&FlagUniqueness != 0 {
		s.uniRows++
	}
}

// Wait is part of [cases.Observer]; the quality model measures wait
// coverage itself, by (queue, activity).
func (a *Accumulator) Wait(*cases.Wait) {}

// Service is part of [cases.Observer].
func (a *Accumulator) Service(*cases.Service) {}

// Case takes the finished record of a case: its stage coverage and the
// case_too_long check are judged per case, at the site of its first event.
func (a *Accumulator) Case(r *cases.Record) {
	if a.cur.id == r.CaseID {
		a.endCase()
	}
	s := a.site(r.Site)
	c := &s.stages
	c.cases++
	if r.Has(schema.Arrival) {
		c.arrival++
	}
	if r.Has(schema.Start) {
		c.start++
	}
	if r.Has(schema.Complete) {
		c.complete++
	}
	if r.Has(schema.Departure) {
		c.departure++
	}
	s.cases.add(r.Duration(), r.Events)
	if uint64(r.Duration()) > a.maxCase {
		s.n[cCaseTooLong]++
		a.keepSample(cCaseTooLong, Sample{CaseID: r.CaseID, Site: s.name})
	}
}

// endCase closes the case in hand: a wait still pending was never
// started, and a case still in the system stays in its site's census up
// to the site's last event (added at report time).
func (a *Accumulator) endCase() {
	st := &a.cur
	s := a.sites[st.site]
	if st.flags&csWaitPending != 0 && st.wait > 0 {
		a.waitAt(st.wait-1).noStart++
		s.n[cWaitNoStart]++
	}
	if st.flags&csInSystem != 0 {
		if st.flags&csPrevTransfer != 0 {
			// Transferred out: it left at the transfer, its last event.
			a.leave(s, st.rec)
		} else {
			// Never left: in the census to the site's last event (added at
			// report time); its stay ends where it was last seen.
			s.openN++
			s.openEntry.add(uint64(st.entry + instantShift))
			s.stayed.add(uint64(st.rec - st.entry))
		}
	}
	*st = caseState{seenAt: st.seenAt[:0]}
}

// enter puts the case in hand into the census of site s at at.
func (a *Accumulator) enter(s *siteAcc, at int64) {
	a.cur.entry = at
	a.cur.flags |= csInSystem
	s.entries++
}

// leave takes the case in hand out of the census of its site at at.
func (a *Accumulator) leave(s *siteAcc, at int64) {
	s.area.add(uint64(at - a.cur.entry))
	s.stayed.add(uint64(at - a.cur.entry))
	s.exits++
	a.cur.flags &^= csInSystem
}

// caseEvent is the event in hand in the per-case pass: its site, type
// index and instant (µs), and the problems its checks found.
type caseEvent struct {
	s             *siteAcc
	e             *schema.Event
	ti            int
	at            int64
	acc, con, uni bool
}

// observeCase runs the per-case checks for e (type index ti) at at and
// reports whether e has an accuracy, consistency or uniqueness problem:
// first those of its instant and site, then those of its type, then the
// end of a stay by an abandon or a terminal type.
//
// Within a case in time order "a start earlier than the case's arrival"
// shows as an arrival or enqueue observed at a later instant than a start
// that had no arrival or enqueue before it; the arrival (or enqueue) row
// is the one counted, once per such start. The other order kinds work
// alike. Equal instants are never order violations (see
// same_instant_order).
func (a *Accumulator) observeCase(s *siteAcc, ti int, e *schema.Event, at int64) (acc, con, uni bool) {
	ev := caseEvent{s: s, e: e, ti: ti, at: at}
	if a.cur.id == "" {
		a.openCase(&ev)
	} else {
		a.nextInstant(&ev)
		if a.cur.site != s.idx {
			a.moveSite(&ev)
		}
	}
	switch ti {
	case tArrival:
		a.caseArrival(&ev)
	case tEnqueue:
		a.caseEnqueue(&ev)
	case tStart:
		a.caseStart(&ev)
	case tComplete:
		a.caseComplete(&ev)
	case tAbandon:
		a.afterDeparture(&ev)
		a.endWait()
	case tTransfer:
		a.endWait()
	case tDeparture:
		a.caseDeparture(&ev)
	}
	a.caseExit(&ev)
	return ev.acc, ev.con, ev.uni
}

// openCase starts the case in hand with its first event.
func (a *Accumulator) openCase(ev *caseEvent) {
	st := &a.cur
	*st = caseState{id: strings.Clone(ev.e.CaseID), first: ev.at, rec: ev.at, site: ev.s.idx, typesAt: uint8(1) << ev.ti, seenAt: st.seenAt[:0]}
	st.seen(ev.ti, ev.e)
	if ev.ti != tArrival {
		// Already in the system when the data begins (or its arrival
		// is lost): it enters the census at its first event.
		a.enter(ev.s, ev.at)
		st.flags |= csImplicit
	}
}

// nextInstant checks a later event of the case in hand against those at
// the same instant, or makes its instant the latest.
func (a *Accumulator) nextInstant(ev *caseEvent) {
	st := &a.cur
	bit := uint8(1) << ev.ti
	if st.rec != ev.at {
		st.rec = ev.at
		st.typesAt = bit
		st.seenAt = st.seenAt[:0]
		st.seen(ev.ti, ev.e)
		st.flags &^= csNowFlags
		return
	}
	a.flag(ev.s, cSameInstant, ev.e)
	if st.typesAt&conflicts[ev.ti] != 0 && st.bounds(ev.ti, ev.e) {
		a.flag(ev.s, cSameInstantOrder, ev.e)
		ev.acc = true
	}
	if x := st.seen(ev.ti, ev.e); x != nil {
		a.flag(ev.s, cDuplicateCaseTypeTime, ev.e)
		ev.uni = true
		// In a version's pass the upload's events carry their source
		// lines and those read back from stored files none: such a pair
		// is certainly in two files. Samples only; the count is
		// WithCases'.
		if (x.line > 0) != (ev.e.Line > 0) {
			t := ev.e.OccurredAt.UTC()
			a.keepSample(cDuplicateAcrossFiles, Sample{CaseID: ev.e.CaseID, Site: ev.s.name, At: &t})
		}
	}
	st.typesAt |= bit
}

// moveSite moves the case in hand to the event's site: a change of site
// not by a transfer is flagged, and a case in the system leaves the
// census of its old site for that of the new one.
func (a *Accumulator) moveSite(ev *caseEvent) {
	st := &a.cur
	if ev.ti != tTransfer && st.flags&csPrevTransfer == 0 {
		a.flag(ev.s, cSiteChange, ev.e)
		ev.con = true
	}
	if st.flags&csInSystem != 0 {
		a.leave(a.sites[st.site], ev.at)
		a.enter(ev.s, ev.at)
	}
	st.site = ev.s.idx
}

// settle clears a pending order problem, the flag pend (pendNow when it
// was raised at the latest instant), that the event resolves: flagged as
// check c unless both fell at one instant.
func (a *Accumulator) settle(ev *caseEvent, pend, pendNow uint32, c int) {
	st := &a.cur
	if st.flags&pend == 0 {
		return
	}
	if st.flags&pendNow == 0 {
		a.flag(ev.s, c, ev.e)
		ev.acc = true
	}
	st.flags &^= pend | pendNow
}

// afterDeparture flags an event after the case departed, at a later
// instant and with no arrival since.
func (a *Accumulator) afterDeparture(ev *caseEvent) {
	if f := a.cur.flags; f&csDeparted != 0 && f&csDepartedNow == 0 {
		a.flag(ev.s, cAfterDeparture, ev.e)
		ev.acc = true
	}
}

// anchor records an arrival or enqueue, settling a start seen before it.
func (a *Accumulator) anchor(ev *caseEvent) {
	a.settle(ev, csPendStart, csPendStartNow, cStartBeforeArrival)
	a.cur.flags |= csAnchored
}

// endWait ends the pending wait, measured (a start, abandon or transfer).
func (a *Accumulator) endWait() {
	if a.cur.flags&csWaitPending != 0 {
		a.cur.flags &^= csWaitPending
		a.cur.wait = 0
	}
}

// caseArrival opens a stay: it settles a start or departure seen before
// it and puts the case in the census unless it is there.
func (a *Accumulator) caseArrival(ev *caseEvent) {
	st := &a.cur
	a.anchor(ev)
	a.settle(ev, csPendDep, csPendDepNow, cDepartureBeforeArrival)
	ev.s.arrivals++
	if st.flags&csImplicit != 0 {
		st.flags &^= csImplicit // its entry is counted already
	} else if st.flags&csInSystem == 0 {
		a.enter(ev.s, ev.at)
	}
	st.flags |= csArr | csWaitAnchor | csStay
	st.flags &^= csDeparted | csDepartedNow | csExited
	st.arr = ev.at
}

// caseEnqueue opens a wait by (queue, activity); a wait still pending was
// never started.
func (a *Accumulator) caseEnqueue(ev *caseEvent) {
	st := &a.cur
	a.afterDeparture(ev)
	a.anchor(ev)
	if st.flags&csWaitPending != 0 {
		a.waitNoStart(ev.s, st, ev.e)
	}
	w := a.waitOf(ev.e)
	a.waitAt(w).waits++
	st.wait = w + 1
	st.flags |= csWaitPending
}

// caseStart opens a service: it settles a complete seen before it, ends
// the pending wait, or counts a wait with no enqueue since the last
// start or arrival.
func (a *Accumulator) caseStart(ev *caseEvent) {
	st := &a.cur
	a.afterDeparture(ev)
	a.settle(ev, csPendComplete, csPendCompleteNow, cCompleteBeforeStart)
	if st.flags&(csAnchored|csPendStart) == 0 {
		st.flags |= csPendStart | csPendStartNow
	}
	st.flags |= csStarted | csStart
	if st.flags&csWaitPending != 0 {
		a.endWait()
	} else {
		w := a.waitAt(a.waitOf(ev.e))
		w.waits++
		if st.flags&csWaitAnchor == 0 {
			w.noEnqueue++
			a.flag(ev.s, cWaitNoEnqueue, ev.e)
		}
	}
	st.flags &^= csWaitAnchor
	st.start = ev.at
	st.flags |= csOpenStart
}

// caseComplete closes the open service, flagging one longer than the
// activity's limit.
func (a *Accumulator) caseComplete(ev *caseEvent) {
	st := &a.cur
	a.afterDeparture(ev)
	if st.flags&(csStarted|csPendComplete) == 0 {
		st.flags |= csPendComplete | csPendCompleteNow
	}
	st.flags |= csComplete
	if st.flags&csOpenStart != 0 {
		if ev.at-st.start > a.serviceLimit(ev.e.Activity) {
			a.flag(ev.s, cServiceTooLong, ev.e)
			ev.acc = true
		}
		st.flags &^= csOpenStart
	}
}

// serviceLimit returns the longest service of activity, µs.
func (a *Accumulator) serviceLimit(activity string) int64 {
	if a.maxServiceAct != nil {
		if d, ok := a.maxServiceAct[activity]; ok {
			return d
		}
	}
	return a.maxService
}

// caseDeparture closes the stay: a pending wait was never started, and
// the case leaves the census (a departure of a case not in it is one
// departure too many).
func (a *Accumulator) caseDeparture(ev *caseEvent) {
	st := &a.cur
	if st.flags&csArr == 0 {
		st.flags |= csPendDep | csPendDepNow
	}
	if st.flags&csWaitPending != 0 {
		a.waitNoStart(ev.s, st, ev.e)
		st.flags &^= csWaitPending
	}
	st.flags &^= csOpenStart
	if st.flags&csInSystem != 0 {
		a.leave(ev.s, ev.at)
	} else if st.flags&csExited == 0 {
		// A departure of a case that is not in the system (and did
		// not leave by an abandon or a terminal type): more
		// departures than entries.
		a.flag(ev.s, cCensusNegative, ev.e)
		ev.con = true
	}
	st.flags &^= csStay | csImplicit
	st.flags |= csDep | csDeparted | csDepartedNow
}

// caseExit ends the stay at an abandon or a declared terminal type, and
// notes whether the event was a transfer.
func (a *Accumulator) caseExit(ev *caseEvent) {
	st := &a.cur
	if ev.ti != tDeparture && st.flags&csInSystem != 0 && cases.Exits(ev.e.Type, a.opt.Terminal) {
		a.leave(ev.s, ev.at)
		st.flags |= csExited
	}
	if ev.ti == tTransfer {
		st.flags |= csPrevTransfer
	} else {
		st.flags &^= csPrevTransfer
	}
}

// waitNoStart counts the pending enqueue of st as a wait never started.
func (a *Accumulator) waitNoStart(s *siteAcc, st *caseState, e *schema.Event) {
	if st.wait > 0 {
		a.waitAt(st.wait-1).noStart++
		a.flag(s, cWaitNoStart, e)
	}
	st.wait = 0
}

// waitAt returns the wait counts of index i, a pair's or those of the
// pairs beyond the cap.
func (a *Accumulator) waitAt(i int32) *waitAcc {
	if i == waitBeyond {
		return &a.waitsBeyond
	}
	return &a.waits[i]
}

// waitOf returns the index of e's (queue, activity) pair, or waitBeyond
// beyond the cap.
func (a *Accumulator) waitOf(e *schema.Event) int32 {
	if c := a.waitCache; c > 0 {
		if w := &a.waits[c-1].key; w.queue == e.Queue && w.activity == e.Activity {
			return c - 1
		}
	}
	i, ok := a.waitIndex[waitKey{e.Queue, e.Activity}]
	if !ok {
		if !keyRoom(len(a.waits), a.waitBytes, len(e.Queue)+len(e.Activity)) {
			return waitBeyond
		}
		a.waitBytes += len(e.Queue) + len(e.Activity)
		i = int32(len(a.waits))
		k := waitKey{strings.Clone(e.Queue), strings.Clone(e.Activity)}
		a.waits = append(a.waits, waitAcc{key: k})
		a.waitIndex[k] = i
	}
	a.waitCache = i + 1
	return i
}

// ObserveSorted runs both passes over accepted events held in memory, in
// non-decreasing OccurredAt order: Observe for each, then the per-case
// pass in case order. It suits small inputs and tests; catalog streams
// the per-case pass through a sort on disk instead.
func (a *Accumulator) ObserveSorted(evs []schema.Event) {
	flags := make([]Flags, len(evs))
	for i := range evs {
		flags[i] = a.Observe(&evs[i])
	}
	a.observeCases(evs, flags)
}

// observeCases is ObserveSorted's per-case pass over evs, whose time pass
// gave flags.
func (a *Accumulator) observeCases(evs []schema.Event, flags []Flags) {
	idx := make([]int, len(evs))
	for i := range idx {
		idx[i] = i
	}
	slices.SortStableFunc(idx, func(i, j int) int { return cases.Less(&evs[i], &evs[j]) })
	b := cases.NewBuilder(a)
	b.Terminal = a.opt.Terminal
	for _, i := range idx {
		e := evs[i]
		e.Line = PackLine(e.Line, flags[i])
		b.Add(&e)
	}
	b.Flush()
}
