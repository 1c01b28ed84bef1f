package summary

import (
	"errors"
	"fmt"
	"slices"
)

// Sentinel errors of Merge and UnmarshalBinary.
var (
	ErrIncompatible = errors.New("accumulators have different options") // Merge of accumulators with other options
	ErrCorrupt      = errors.New("malformed summary state")             // UnmarshalBinary of bad bytes
	ErrOldState     = errors.New("summary state of an earlier format")  // UnmarshalBinary of a state to recompute
)

func (a *Accumulator) compatible(o *Accumulator) bool {
	return a.loc.String() == o.loc.String() && slices.Equal(a.thr, o.thr) &&
		a.res == o.res && a.cap == o.cap
}

// Merge adds the state of o to a, as if a had observed o's events too, and
// fails with ErrIncompatible if their options differ. o is not changed
// and may be used again. Exact counts set by SetCounts do not merge: the
// caller sets them again for the merged whole.
func (a *Accumulator) Merge(o *Accumulator) error {
	if !a.compatible(o) {
		return fmt.Errorf("summary: merge: %w", ErrIncompatible)
	}
	a.finish()
	o.finish()
	a.events += o.events
	for i := range a.types {
		a.types[i] += o.types[i]
	}
	a.otherTypes += o.otherTypes
	a.outOfOrder += o.outOfOrder
	if o.hasTime {
		if !a.hasTime || o.minAt < a.minAt {
			a.minAt = o.minAt
		}
		if !a.hasTime || o.maxAt > a.maxAt {
			a.maxAt = o.maxAt
		}
		a.hasTime = true
		a.prevAt = max(a.prevAt, o.prevAt)
	}
	a.counted = nil
	a.cases.merge(o.cases)
	a.subjects.merge(o.subjects)
	a.resources.merge(o.resources)
	for _, g := range o.sites.list {
		d := a.sites.list[a.sites.get(g.name)]
		d.events += g.events
		addWeek(&d.arr, &g.arr)
	}
	for _, g := range o.queues.list {
		d := a.queues.list[a.queues.get(g.name)]
		d.events += g.events
		addWeek(&d.arr, &g.arr)
		d.served.merge(g.served, a.cap)
		d.abandoned.merge(g.abandoned, a.cap)
		for i := range d.over {
			d.over[i] += g.over[i]
		}
		d.negative += g.negative
		d.svcN += g.svcN
		d.svcSum.merge(g.svcSum)
	}
	for _, g := range o.acts.list {
		d := a.acts.list[a.acts.get(g.name)]
		d.events += g.events
		d.svc.merge(g.svc, a.cap)
		d.negative += g.negative
	}
	a.arrivals += o.arrivals
	addWeek(&a.arrWeek, &o.arrWeek)
	for d, c := range o.arrDay {
		a.arrDay[d] += c
	}
	for _, r := range o.days {
		a.days.add(r)
	}
	a.los.merge(o.los, a.cap)
	a.evCase.merge(o.evCase, a.cap)
	a.between.merge(o.between, a.cap)
	a.census.merge(&o.census)
	for k, b := range o.occ {
		x := a.occ[k]
		if x == nil {
			x = &occBucket{}
			a.occ[k] = x
		}
		x.arr += b.arr
		x.dep += b.dep
		x.arrRest += b.arrRest
		x.depRest += b.depRest
	}
	if o.process != nil {
		a.Process().merge(o.process)
	}
	return nil
}

func addWeek(d, s *[168]uint64) {
	for i := range d {
		d[i] += s[i]
	}
}
