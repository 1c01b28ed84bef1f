package quality

import (
	"hash/maphash"

	"github.com/flowcat-catalog/flowcat/schema"
)

// caseState is what the order checks remember of one case. Cases are
// keyed by a 64-bit seeded hash of the case pseudonym rather than the
// string itself, so that the map neither pins the caller's strings nor
// allocates per case; two open cases sharing a hash (odds about n²/2⁶⁵
// for n open cases) would merely share one record.
type caseState struct {
	last       int64 // latest instant seen, for pruning
	startAt    int64 // instant of a start not preceded by arrival or enqueue
	completeAt int64 // instant of a complete not preceded by a start
	mask       uint8
}

const (
	caseAnchored        uint8 = 1 << iota // an arrival or enqueue was seen
	caseStarted                           // a start was seen
	casePendingStart                      // startAt holds an unanchored start
	casePendingComplete                   // completeAt holds an unstarted complete
)

// observeCase updates the case's record and reports whether e is a row
// found out of order within its case.
//
// In a time-sorted stream, "a start earlier than the case's arrival" shows
// as an arrival or enqueue observed at a later instant than a start that
// had no arrival or enqueue before it; the arrival (or enqueue) row is the
// one counted, once per such start. Likewise a start observed later than
// a complete that had no start before it counts the start row. A case
// that is served, transferred and enqueued again is not flagged, and equal
// instants are never violations.
func (a *Accumulator) observeCase(e *schema.Event, at int64) bool {
	var bit uint8
	switch e.Type {
	case schema.Arrival, schema.Enqueue:
		bit = caseAnchored
	case schema.Start:
		bit = caseStarted
	case schema.Complete:
	default:
		// Other types change no check but keep the case open.
		k := a.caseKey(e)
		if st, ok := a.cases[k]; ok {
			st.last = at
			a.cases[k] = st
		}
		return false
	}
	k := a.caseKey(e)
	st := a.cases[k]
	st.last = at
	flagged := false
	switch bit {
	case caseAnchored:
		if st.mask&casePendingStart != 0 {
			if at > st.startAt {
				a.startBeforeArrival.add(a.opt.MaxSamples, sampleOf(e))
				flagged = true
			}
			st.mask &^= casePendingStart
		}
		st.mask |= caseAnchored
	case caseStarted:
		if st.mask&casePendingComplete != 0 {
			if at > st.completeAt {
				a.completeBeforeStart.add(a.opt.MaxSamples, sampleOf(e))
				flagged = true
			}
			st.mask &^= casePendingComplete
		}
		if st.mask&(caseAnchored|casePendingStart) == 0 {
			st.mask |= casePendingStart
			st.startAt = at
		}
		st.mask |= caseStarted
	default: // complete
		if st.mask&(caseStarted|casePendingComplete) == 0 {
			st.mask |= casePendingComplete
			st.completeAt = at
		}
	}
	a.cases[k] = st
	return flagged
}

func (a *Accumulator) caseKey(e *schema.Event) uint64 {
	return maphash.String(a.seed, e.CaseID)
}

// prune drops the records of cases idle for longer than the horizon.
func (a *Accumulator) prune(now int64) {
	a.sincePrune = 0
	for k, st := range a.cases {
		if now-st.last > a.horizon {
			delete(a.cases, k)
		}
	}
	a.keptCases = len(a.cases)
}

// openCases is the number of case records held (for tests).
func (a *Accumulator) openCases() int { return len(a.cases) }
