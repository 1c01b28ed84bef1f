package quality

import (
	"hash/maphash"
	"strings"

	"github.com/flowcat-catalog/flowcat/schema"
)

// caseState is what the per-case checks keep of one open case, some 40
// bytes; the table keys cases by a 64-bit seeded hash of the case
// pseudonym rather than the string itself, so it neither pins the
// caller's strings nor allocates per case. Two open cases sharing a hash
// (odds about n²/2⁶⁵ for n open cases) would merely share one record.
// Instants are microseconds after the stream's first instant.
type caseState struct {
	first   uint64 // first event
	arr     uint64 // the arrival that opened the current stay
	start   uint64 // the open start
	flags   uint32
	site    uint16 // site index of the latest event
	typesAt uint8  // event types seen at the latest instant
	wait    int32  // (queue, activity) index+1 of the pending enqueue
	res     int32  // resource index+1 of the open start
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
	csLong                               // case_too_long already counted
	csOpenStart                          // start holds a start not yet completed
	csWaitPending                        // an enqueue waits for its start
	csWaitAnchor                         // an arrival since the last start
	csPrevTransfer                       // the latest event was a transfer
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

// observeCase runs the per-case checks for e (type index ti) at rel and
// reports whether e has an accuracy, consistency or uniqueness problem.
//
// In a time-sorted stream "a start earlier than the case's arrival" shows
// as an arrival or enqueue observed at a later instant than a start that
// had no arrival or enqueue before it; the arrival (or enqueue) row is the
// one counted, once per such start. The other order kinds work alike.
// Equal instants are never order violations (see same_instant_order).
func (a *Accumulator) observeCase(s *siteAcc, ti int, e *schema.Event, rel uint64) (acc, con, uni bool) {
	k := nonZero(maphash.String(a.seed, e.CaseID))
	sl, ok := a.cases.lookup(k)
	if ok && rel-sl.rec > a.horizon {
		// Idle past the horizon: checked as a new case, whether or not a
		// sweep has dropped it yet, so counts do not depend on file size.
		a.closeCase(sl)
		ok = false
	} else if !ok {
		a.cases.claim(sl, k)
	}
	st := &sl.v
	bit := uint8(1) << ti
	if !ok {
		*st = caseState{first: rel, site: uint16(s.idx), typesAt: bit}
		sl.rec = rel
		if ti != tArrival {
			// Already in the system when the data begins (or its arrival
			// is lost): it enters the census at its first event.
			s.census++
			st.flags |= csInSystem | csImplicit
		}
	} else {
		if sl.rec == rel {
			a.flag(s, cSameInstant, e)
			if st.typesAt&conflicts[ti] != 0 {
				a.flag(s, cSameInstantOrder, e)
				acc = true
			}
			if st.typesAt&bit != 0 {
				a.flag(s, cDuplicateCaseTypeTime, e)
				uni = true
			}
			st.typesAt |= bit
		} else {
			sl.rec = rel
			st.typesAt = bit
			st.flags &^= csNowFlags
		}
		if int(st.site) != s.idx {
			if ti != tTransfer && st.flags&csPrevTransfer == 0 {
				a.flag(s, cSiteChange, e)
				con = true
			}
			if st.flags&csInSystem != 0 {
				// The case moves: it leaves the census of its old site.
				old := a.sites[st.site]
				a.census(old, int64(rel)+a.base)
				old.census--
				s.census++
			}
			st.site = uint16(s.idx)
		}
		if st.flags&csLong == 0 && rel-st.first > a.maxCase {
			a.flag(s, cCaseTooLong, e)
			st.flags |= csLong
			acc = true
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
		} else {
			s.census++
		}
		f |= csArr | csWaitAnchor | csInSystem | csStay
		f &^= csDeparted | csDepartedNow
		st.arr = rel
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
		if f&csOpenStart != 0 {
			a.closeInterval(st, k)
		}
		st.start, st.res = rel, 0
		f |= csOpenStart
		if e.ResourceID != "" {
			if r := a.resource(e.ResourceID); r >= 0 {
				if a.openInterval(r, k, rel) {
					a.flag(s, cResourceOverlap, e)
					con = true
				}
				st.res = r + 1
			}
		}
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
			if int64(rel-st.start) > limit {
				a.flag(s, cServiceTooLong, e)
				acc = true
			}
			a.closeInterval(st, k)
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
		if f&csOpenStart != 0 {
			a.closeInterval(st, k)
			f &^= csOpenStart
		}
		s.census--
		if s.census < s.censusMin {
			s.censusMin = s.census
		}
		if s.census < 0 {
			a.flag(s, cCensusNegative, e)
			con = true
		}
		if f&csStay != 0 {
			s.completed++
			s.sojourn += float64(rel - st.arr)
		}
		f &^= csStay | csInSystem | csImplicit
		f |= csDep | csDeparted | csDepartedNow
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

// closeCase retires a record dropped for idleness: it tallies the case's
// stages and counts a wait still pending as never started (without a
// sample: no row is at hand).
func (a *Accumulator) closeCase(sl *slot[caseState]) {
	st := &sl.v
	s := a.sites[st.site]
	tallyStages(&s.stages, st.flags)
	if st.flags&csWaitPending != 0 && st.wait > 0 {
		a.waits[st.wait-1].noStart++
		s.n[cWaitNoStart]++
	}
	if st.flags&csOpenStart != 0 {
		a.closeInterval(st, sl.key)
	}
}

func tallyStages(c *stageCounts, f uint32) {
	c.cases++
	if f&csArr != 0 {
		c.arrival++
	}
	if f&csStart != 0 {
		c.start++
	}
	if f&csComplete != 0 {
		c.complete++
	}
	if f&csDep != 0 {
		c.departure++
	}
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

// resource returns the index of resource id, or -1 beyond the cap.
func (a *Accumulator) resource(id string) int32 {
	i, ok := a.resIndex[id]
	if !ok {
		if len(a.resources) >= maxKeys {
			return -1
		}
		i = int32(len(a.resources))
		a.resources = append(a.resources, resAcc{})
		a.resIndex[strings.Clone(id)] = i
	}
	return i
}

// openInterval opens a service interval of case k at resource r and
// reports whether the resource is then serving more cases than its
// capacity. Intervals open for longer than the default service maximum
// are taken as lost completes and no longer count.
func (a *Accumulator) openInterval(r int32, k, rel uint64) bool {
	res := &a.resources[r]
	kept := res.open[:0]
	for _, iv := range res.open {
		if int64(rel-uint64(iv.at)) <= a.maxService {
			kept = append(kept, iv)
		}
	}
	over := len(kept) >= a.opt.ResourceCapacity
	res.open = append(kept, openInterval{caseKey: k, at: int64(rel)})
	return over
}

// closeInterval ends the open service interval of case k, if its
// resource still holds it.
func (a *Accumulator) closeInterval(st *caseState, k uint64) {
	if st.res == 0 {
		return
	}
	res := &a.resources[st.res-1]
	for i, iv := range res.open {
		if iv.caseKey == k {
			res.open = append(res.open[:i], res.open[i+1:]...)
			break
		}
	}
	st.res = 0
}
