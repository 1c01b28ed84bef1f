package quality

import (
	"hash/maphash"

	"github.com/flowcat-catalog/flowcat/schema"
)

// The order checks keep one uint64 per open case: the case's latest
// instant in microseconds after the file's first instant (upper 56 bits,
// some 2000 years) and the flags below (lower 8 bits). Cases are keyed by
// a 64-bit seeded hash of the case pseudonym rather than the string
// itself, so that the table neither pins the caller's strings nor
// allocates per case; two open cases sharing a hash (odds about n²/2⁶⁵
// for n open cases) would merely share one record.
const (
	caseAnchored           uint64 = 1 << iota // an arrival or enqueue was seen
	caseStarted                               // a start was seen
	casePendingStart                          // a start came before any arrival or enqueue
	casePendingComplete                       // a complete came before any start
	casePendingStartNow                       // ... that start was at the latest instant
	casePendingCompleteNow                    // ... that complete was at the latest instant
	caseFlagBits           = 8
	caseFlags              = 1<<caseFlagBits - 1
	maxRel                 = 1<<(64-caseFlagBits) - 1 // largest instant a case record holds
	caseNowFlags           = casePendingStartNow | casePendingCompleteNow
)

// observeCase updates the case's record and reports whether e is a row
// found out of order within its case. at is the event's instant relative
// to the file's first.
//
// In a time-sorted stream, "a start earlier than the case's arrival" shows
// as an arrival or enqueue observed at a later instant than a start that
// had no arrival or enqueue before it; the arrival (or enqueue) row is the
// one counted, once per such start. Likewise a start observed later than
// a complete that had no start before it counts the start row. A case
// that is served, transferred and enqueued again is not flagged, and equal
// instants are never violations.
func (a *Accumulator) observeCase(e *schema.Event, at uint64) bool {
	k := maphash.String(a.seed, e.CaseID)
	if k == 0 { // 0 marks an empty slot
		k = 1
	}
	slot, ok := a.cases.lookup(k)
	st := slot.rec
	if ok && at-st>>caseFlagBits > a.horizon {
		// Idle past the horizon: checked as a new case, whether or not a
		// sweep has dropped it yet, so counts do not depend on file size.
		st = 0
	}
	var kind uint64
	switch e.Type {
	case schema.Arrival, schema.Enqueue:
		kind = caseAnchored
	case schema.Start:
		kind = caseStarted
	case schema.Complete:
	default:
		// Other types change no check but keep the case open.
		if ok {
			slot.rec = a.touch(st, at)
		}
		return false
	}
	if !ok {
		a.cases.claim(slot, k)
	}
	st = a.touch(st, at)
	flagged := false
	switch kind {
	case caseAnchored:
		if st&casePendingStart != 0 {
			if st&casePendingStartNow == 0 {
				a.startBeforeArrival.add(a.opt.MaxSamples, sampleOf(e))
				flagged = true
			}
			st &^= casePendingStart | casePendingStartNow
		}
		st |= caseAnchored
	case caseStarted:
		if st&casePendingComplete != 0 {
			if st&casePendingCompleteNow == 0 {
				a.completeBeforeStart.add(a.opt.MaxSamples, sampleOf(e))
				flagged = true
			}
			st &^= casePendingComplete | casePendingCompleteNow
		}
		if st&(caseAnchored|casePendingStart) == 0 {
			st |= casePendingStart | casePendingStartNow
		}
		st |= caseStarted
	default: // complete
		if st&(caseStarted|casePendingComplete) == 0 {
			st |= casePendingComplete | casePendingCompleteNow
		}
	}
	slot.rec = st
	return flagged
}

// touch moves the record's latest instant to at; the "now" flags hold
// only while the instant stays the same.
func (a *Accumulator) touch(st, at uint64) uint64 {
	if st>>caseFlagBits != at {
		st = at<<caseFlagBits | st&caseFlags&^caseNowFlags
	}
	return st
}

// prune drops the records of cases idle for longer than the horizon.
func (a *Accumulator) prune(now uint64) {
	a.sincePrune = 0
	a.cases.sweep(func(rec uint64) bool { return now-rec>>caseFlagBits > a.horizon })
	a.keptCases = a.cases.n
}

// openCases is the number of case records held (for tests).
func (a *Accumulator) openCases() int { return a.cases.n }
