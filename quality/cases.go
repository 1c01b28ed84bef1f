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
		a.waits[st.wait-1].noStart++
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

// observeCase runs the per-case checks for e (type index ti) at at and
// reports whether e has an accuracy, consistency or uniqueness problem.
//
// Within a case in time order "a start earlier than the case's arrival"
// shows as an arrival or enqueue observed at a later instant than a start
// that had no arrival or enqueue before it; the arrival (or enqueue) row
// is the one counted, once per such start. The other order kinds work
// alike. Equal instants are never order violations (see
// same_instant_order).
func (a *Accumulator) observeCase(s *siteAcc, ti int, e *schema.Event, at int64) (acc, con, uni bool) {
	st := &a.cur
	bit := uint8(1) << ti
	if st.id == "" {
		*st = caseState{id: strings.Clone(e.CaseID), first: at, rec: at, site: s.idx, typesAt: bit, seenAt: st.seenAt[:0]}
		st.seen(ti, e)
		if ti != tArrival {
			// Already in the system when the data begins (or its arrival
			// is lost): it enters the census at its first event.
			a.enter(s, at)
			st.flags |= csImplicit
		}
	} else {
		if st.rec == at {
			a.flag(s, cSameInstant, e)
			if st.typesAt&conflicts[ti] != 0 && st.bounds(ti, e) {
				a.flag(s, cSameInstantOrder, e)
				acc = true
			}
			if x := st.seen(ti, e); x != nil {
				a.flag(s, cDuplicateCaseTypeTime, e)
				uni = true
				// In a version's pass the upload's events carry their
				// source lines and those read back from stored files none:
				// such a pair is certainly in two files. Samples only; the
				// count is WithCases'.
				if (x.line > 0) != (e.Line > 0) {
					at := e.OccurredAt.UTC()
					a.keepSample(cDuplicateAcrossFiles, Sample{CaseID: e.CaseID, Site: s.name, At: &at})
				}
			}
			st.typesAt |= bit
		} else {
			st.rec = at
			st.typesAt = bit
			st.seenAt = st.seenAt[:0]
			st.seen(ti, e)
			st.flags &^= csNowFlags
		}
		if st.site != s.idx {
			if ti != tTransfer && st.flags&csPrevTransfer == 0 {
				a.flag(s, cSiteChange, e)
				con = true
			}
			if st.flags&csInSystem != 0 {
				// The case moves: it leaves the census of its old site.
				a.leave(a.sites[st.site], at)
				a.enter(s, at)
			}
			st.site = s.idx
		}
	}
	f := st.flags
	afterDeparture := func() {
		if f&csDeparted != 0 && f&csDepartedNow == 0 {
			a.flag(s, cAfterDeparture, e)
			acc = true
		}
	}
	anchor := func() {
		if f&csPendStart != 0 {
			if f&csPendStartNow == 0 {
				a.flag(s, cStartBeforeArrival, e)
				acc = true
			}
			f &^= csPendStart | csPendStartNow
		}
		f |= csAnchored
	}
	switch ti {
	case tArrival:
		anchor()
		if f&csPendDep != 0 {
			if f&csPendDepNow == 0 {
				a.flag(s, cDepartureBeforeArrival, e)
				acc = true
			}
			f &^= csPendDep | csPendDepNow
		}
		s.arrivals++
		if f&csImplicit != 0 {
			f &^= csImplicit // its entry is counted already
		} else if f&csInSystem == 0 {
			st.flags = f
			a.enter(s, at)
			f = st.flags
		}
		f |= csArr | csWaitAnchor | csStay
		f &^= csDeparted | csDepartedNow | csExited
		st.arr = at
	case tEnqueue:
		afterDeparture()
		anchor()
		if f&csWaitPending != 0 {
			a.waitNoStart(s, st, e)
		}
		if w := a.waitOf(e); w >= 0 {
			a.waits[w].waits++
			st.wait = w + 1
			f |= csWaitPending
		}
	case tStart:
		afterDeparture()
		if f&csPendComplete != 0 {
			if f&csPendCompleteNow == 0 {
				a.flag(s, cCompleteBeforeStart, e)
				acc = true
			}
			f &^= csPendComplete | csPendCompleteNow
		}
		if f&(csAnchored|csPendStart) == 0 {
			f |= csPendStart | csPendStartNow
		}
		f |= csStarted | csStart
		if f&csWaitPending != 0 {
			f &^= csWaitPending
			st.wait = 0
		} else if w := a.waitOf(e); w >= 0 {
			a.waits[w].waits++
			if f&csWaitAnchor == 0 {
				a.waits[w].noEnqueue++
				a.flag(s, cWaitNoEnqueue, e)
			}
		}
		f &^= csWaitAnchor
		st.start = at
		f |= csOpenStart
	case tComplete:
		afterDeparture()
		if f&(csStarted|csPendComplete) == 0 {
			f |= csPendComplete | csPendCompleteNow
		}
		f |= csComplete
		if f&csOpenStart != 0 {
			limit := a.maxService
			if a.maxServiceAct != nil {
				if d, ok := a.maxServiceAct[e.Activity]; ok {
					limit = d
				}
			}
			if at-st.start > limit {
				a.flag(s, cServiceTooLong, e)
				acc = true
			}
			f &^= csOpenStart
		}
	case tAbandon, tTransfer:
		if ti == tAbandon {
			afterDeparture()
		}
		if f&csWaitPending != 0 { // the wait ends here, measured
			f &^= csWaitPending
			st.wait = 0
		}
	case tDeparture:
		if f&csArr == 0 {
			f |= csPendDep | csPendDepNow
		}
		if f&csWaitPending != 0 {
			a.waitNoStart(s, st, e)
			f &^= csWaitPending
		}
		f &^= csOpenStart
		if f&csInSystem != 0 {
			st.flags = f
			a.leave(s, at)
			f = st.flags
		} else if f&csExited == 0 {
			// A departure of a case that is not in the system (and did
			// not leave by an abandon or a terminal type): more
			// departures than entries.
			a.flag(s, cCensusNegative, e)
			con = true
		}
		f &^= csStay | csImplicit
		f |= csDep | csDeparted | csDepartedNow
	}
	if ti != tDeparture && f&csInSystem != 0 && cases.Exits(e.Type, a.opt.Terminal) {
		// An abandon or a declared terminal type ends the stay too.
		st.flags = f
		a.leave(s, at)
		f = st.flags | csExited
	}
	if ti == tTransfer {
		f |= csPrevTransfer
	} else {
		f &^= csPrevTransfer
	}
	st.flags = f
	return acc, con, uni
}

// waitNoStart counts the pending enqueue of st as a wait never started.
func (a *Accumulator) waitNoStart(s *siteAcc, st *caseState, e *schema.Event) {
	if st.wait > 0 {
		a.waits[st.wait-1].noStart++
		a.flag(s, cWaitNoStart, e)
	}
	st.wait = 0
}

// waitOf returns the index of e's (queue, activity) pair, or -1 beyond
// the cap.
func (a *Accumulator) waitOf(e *schema.Event) int32 {
	if c := a.waitCache; c > 0 {
		if w := &a.waits[c-1].key; w.queue == e.Queue && w.activity == e.Activity {
			return c - 1
		}
	}
	i, ok := a.waitIndex[waitKey{e.Queue, e.Activity}]
	if !ok {
		if len(a.waits) >= maxKeys {
			return -1
		}
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
