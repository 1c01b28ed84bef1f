package summary

import (
	"encoding/binary"
	"fmt"
	"maps"
	"slices"
	"time"
)

// stateMagic starts every serialized state; the last byte is the format
// version. Format 4 keeps the observed stretches as ranges of days with
// the instants of their first and last event (see ObservationGap) and the
// census of Little's law. Format 5 is format 4 followed by the process
// views of the accumulator's bound observer ([Accumulator.Process]); a
// state without them is still written as format 4, so the states of
// files keep their bytes, and both are read.
const (
	stateMagic        = "FCSUM\x04"
	stateMagicProcess = "FCSUM\x05"
)

// oldStateMagics start states of earlier formats: written before cases
// were whole (their case figures were cut per file; 1), before the
// observed stretches held their first and last instants (2) or before
// the census of Little's law (3). UnmarshalBinary refuses them with
// ErrOldState, and the caller recomputes the state from the file.
var oldStateMagics = []string{"FCSUM\x01", "FCSUM\x02", "FCSUM\x03"}

type enc struct{ b []byte }

func (e *enc) uv(x uint64) { e.b = binary.AppendUvarint(e.b, x) }
func (e *enc) iv(x int64)  { e.b = binary.AppendVarint(e.b, x) }
func (e *enc) str(s string) {
	e.uv(uint64(len(s)))
	e.b = append(e.b, s...)
}
func (e *enc) u128(u u128) { e.uv(u.hi); e.uv(u.lo) }
func (e *enc) week(w *[168]uint64) {
	for _, x := range w {
		e.uv(x)
	}
}

func (e *enc) distinct(d *distinct) {
	if d.set != nil {
		e.uv(0)
		hs := d.sortedSet()
		e.uv(uint64(len(hs)))
		var prev uint64
		for _, h := range hs {
			e.uv(h - prev)
			prev = h
		}
		return
	}
	e.uv(1)
	e.b = append(e.b, d.reg...)
}

func (e *enc) dist(d *dist) {
	e.uv(d.n)
	e.uv(d.zero)
	e.u128(d.sum)
	e.u128(d.sumsq)
	e.iv(d.min)
	e.iv(d.max)
	e.u128(d.lq)
	e.u128(d.lq2)
	if d.exact != nil {
		e.uv(0)
		vs := slices.Sorted(maps.Keys(d.exact))
		e.uv(uint64(len(vs)))
		var prev int64
		for _, v := range vs {
			e.uv(uint64(v - prev))
			e.uv(d.exact[v])
			prev = v
		}
		return
	}
	e.uv(1)
	e.iv(int64(d.skLo))
	e.uv(uint64(len(d.sk)))
	for _, c := range d.sk {
		e.uv(c)
	}
}

// MarshalBinary encodes the accumulator's state: varints, maps in key
// order, so equal states give equal bytes. It first closes every open case
// (see [Accumulator]). It never fails.
func (a *Accumulator) MarshalBinary() ([]byte, error) {
	a.finish()
	magic := stateMagic
	if a.process != nil {
		magic = stateMagicProcess
	}
	e := &enc{b: append(make([]byte, 0, 4096), magic...)}
	e.str(a.loc.String())
	e.uv(uint64(len(a.thr)))
	for _, t := range a.thr {
		e.iv(t)
	}
	e.iv(a.res)
	e.uv(uint64(a.cap))

	e.uv(a.events)
	for _, c := range a.types {
		e.uv(c)
	}
	e.uv(a.otherTypes)
	if a.hasTime {
		e.uv(1)
	} else {
		e.uv(0)
	}
	e.iv(a.minAt)
	e.iv(a.maxAt)
	e.iv(a.prevAt)
	e.uv(a.outOfOrder)
	e.distinct(a.cases)
	e.distinct(a.subjects)
	e.distinct(a.resources)
	if a.counted != nil {
		e.uv(1)
		e.uv(a.counted.Cases)
		e.uv(a.counted.Subjects)
		e.uv(a.counted.Resources)
		e.uv(a.counted.LaterThanUpload)
		e.uv(a.counted.OutsideWindow)
		e.uv(a.counted.ExactDuplicates)
	} else {
		e.uv(0)
	}

	e.uv(uint64(len(a.sites.list)))
	for _, g := range a.sites.list {
		e.str(g.name)
		e.uv(g.events)
		e.week(&g.arr)
	}
	e.uv(uint64(len(a.queues.list)))
	for _, g := range a.queues.list {
		e.str(g.name)
		e.uv(g.events)
		e.week(&g.arr)
		e.dist(g.served)
		e.dist(g.abandoned)
		for _, c := range g.over {
			e.uv(c)
		}
		e.uv(g.negative)
		e.uv(g.svcN)
		e.u128(g.svcSum)
	}
	e.uv(uint64(len(a.acts.list)))
	for _, g := range a.acts.list {
		e.str(g.name)
		e.uv(g.events)
		e.dist(g.svc)
		e.uv(g.negative)
	}
	e.uv(a.arrivals)
	e.week(&a.arrWeek)
	days := slices.Sorted(maps.Keys(a.arrDay))
	e.uv(uint64(len(days)))
	var prev int32
	for _, d := range days {
		e.iv(int64(d - prev))
		e.uv(a.arrDay[d])
		prev = d
	}
	e.uv(uint64(len(a.days)))
	prev = 0
	var prevAt int64
	for _, r := range a.days {
		e.iv(int64(r.first - prev))
		e.uv(uint64(r.last - r.first))
		e.iv(r.from - prevAt)
		e.uv(uint64(r.to - r.from))
		prev, prevAt = r.last, r.to
	}
	e.dist(a.los)
	e.dist(a.evCase)
	e.dist(a.between)
	c := &a.census
	e.uv(c.stays)
	e.uv(c.exits)
	e.uv(c.open)
	e.u128(c.present)
	e.u128(c.openSince)
	e.u128(c.openLast)
	keys := slices.Sorted(maps.Keys(a.occ))
	e.uv(uint64(len(keys)))
	var pk int64
	for _, k := range keys {
		b := a.occ[k]
		e.iv(k - pk)
		pk = k
		e.uv(b.arr)
		e.uv(b.dep)
		e.iv(b.arrRest)
		e.iv(b.depRest)
	}
	if a.process != nil {
		e.process(a.process)
	}
	return e.b, nil
}

type dec struct {
	b   []byte
	err error
}

func (d *dec) fail() {
	if d.err == nil {
		d.err = ErrCorrupt
	}
}

func (d *dec) uv() uint64 {
	x, n := binary.Uvarint(d.b)
	if n <= 0 {
		d.fail()
		d.b = nil
		return 0
	}
	d.b = d.b[n:]
	return x
}

func (d *dec) iv() int64 {
	x, n := binary.Varint(d.b)
	if n <= 0 {
		d.fail()
		d.b = nil
		return 0
	}
	d.b = d.b[n:]
	return x
}

// count reads a length, failing when it exceeds what the remaining bytes
// can hold at per bytes an item.
func (d *dec) count(per int) int {
	n := d.uv()
	if n > uint64(len(d.b)/per) {
		d.fail()
		return 0
	}
	return int(n)
}

func (d *dec) str() string {
	n := d.count(1)
	s := string(d.b[:n])
	d.b = d.b[n:]
	return s
}

func (d *dec) u128() u128 { return u128{hi: d.uv(), lo: d.uv()} }

func (d *dec) week(w *[168]uint64) {
	for i := range w {
		w[i] = d.uv()
	}
}

func (d *dec) distinct() *distinct {
	x := &distinct{}
	switch d.uv() {
	case 0:
		n := d.count(1)
		x.set = make(map[uint64]struct{}, n)
		var h uint64
		for range n {
			h += d.uv()
			x.set[h] = struct{}{}
		}
	case 1:
		if len(d.b) < hllM {
			d.fail()
			return newDistinct()
		}
		x.reg = slices.Clone(d.b[:hllM])
		d.b = d.b[hllM:]
	default:
		d.fail()
		return newDistinct()
	}
	return x
}

func (d *dec) dist() *dist {
	x := &dist{n: d.uv(), zero: d.uv(), sum: d.u128(), sumsq: d.u128(), min: d.iv(), max: d.iv()}
	x.lq, x.lq2 = d.u128(), d.u128()
	switch d.uv() {
	case 0:
		n := d.count(2)
		x.exact = make(map[int64]uint64, n)
		var v int64
		for range n {
			v += int64(d.uv())
			x.exact[v] = d.uv()
		}
	case 1:
		x.skLo = int32(d.iv())
		n := d.count(1)
		x.sk = make([]uint64, n)
		for i := range x.sk {
			x.sk[i] = d.uv()
		}
	default:
		d.fail()
		return newDist()
	}
	return x
}

// UnmarshalBinary replaces a's state with one encoded by
// [Accumulator.MarshalBinary]. It fails with ErrCorrupt on malformed bytes
// and with an error from time.LoadLocation on an unknown zone.
func (a *Accumulator) UnmarshalBinary(b []byte) error {
	for _, m := range oldStateMagics {
		if len(b) >= len(m) && string(b[:len(m)]) == m {
			return fmt.Errorf("summary: %w", ErrOldState)
		}
	}
	if len(b) < len(stateMagic) || string(b[:len(stateMagic)]) != stateMagic && string(b[:len(stateMagic)]) != stateMagicProcess {
		return fmt.Errorf("summary: %w", ErrCorrupt)
	}
	withProcess := string(b[:len(stateMagic)]) == stateMagicProcess
	d := &dec{b: b[len(stateMagic):]}
	var opt Options
	locName := d.str()
	loc, err := time.LoadLocation(locName)
	if err != nil {
		return fmt.Errorf("summary: %w", err)
	}
	opt.Location = loc
	for range d.count(1) {
		opt.WaitThresholds = append(opt.WaitThresholds, time.Duration(d.iv())*time.Microsecond)
	}
	opt.Resolution = time.Duration(d.iv()) * time.Microsecond
	opt.ExactValues = int(d.uv())
	if d.err != nil {
		return fmt.Errorf("summary: %w", d.err)
	}
	x := New(opt)
	x.events = d.uv()
	for i := range x.types {
		x.types[i] = d.uv()
	}
	x.otherTypes = d.uv()
	x.hasTime = d.uv() == 1
	x.minAt, x.maxAt, x.prevAt = d.iv(), d.iv(), d.iv()
	x.outOfOrder = d.uv()
	x.cases, x.subjects, x.resources = d.distinct(), d.distinct(), d.distinct()
	if d.uv() == 1 {
		x.counted = &Counts{Cases: d.uv(), Subjects: d.uv(), Resources: d.uv(), LaterThanUpload: d.uv(), OutsideWindow: d.uv(), ExactDuplicates: d.uv()}
	}
	for range d.count(170) {
		g := x.sites.list[x.sites.get(d.str())]
		g.events = d.uv()
		d.week(&g.arr)
	}
	for range d.count(170) {
		g := x.queues.list[x.queues.get(d.str())]
		g.events = d.uv()
		d.week(&g.arr)
		g.served, g.abandoned = d.dist(), d.dist()
		for i := range g.over {
			g.over[i] = d.uv()
		}
		g.negative, g.svcN, g.svcSum = d.uv(), d.uv(), d.u128()
	}
	for range d.count(3) {
		g := x.acts.list[x.acts.get(d.str())]
		g.events = d.uv()
		g.svc = d.dist()
		g.negative = d.uv()
	}
	x.arrivals = d.uv()
	d.week(&x.arrWeek)
	var day int32
	for range d.count(2) {
		day += int32(d.iv())
		x.arrDay[day] = d.uv()
	}
	day = 0
	var at int64
	for range d.count(4) {
		first := day + int32(d.iv())
		day = first + int32(d.uv())
		from := at + d.iv()
		at = from + int64(d.uv())
		if day < first || at < from || from < minInstant || at > maxInstant || len(x.days) > 0 && first <= x.days[len(x.days)-1].last+observedJoinDays {
			d.err = ErrCorrupt
			break
		}
		x.days = append(x.days, dayRange{first: first, last: day, from: from, to: at})
	}
	x.los = d.dist()
	x.evCase = d.dist()
	x.between = d.dist()
	x.census = census{stays: d.uv(), exits: d.uv(), open: d.uv(), present: d.u128(), openSince: d.u128(), openLast: d.u128()}
	var k int64
	for range d.count(5) {
		k += d.iv()
		x.occ[k] = &occBucket{arr: d.uv(), dep: d.uv(), arrRest: d.iv(), depRest: d.iv()}
	}
	if withProcess {
		x.process = d.process(x)
	}
	if d.err != nil || len(d.b) != 0 {
		return fmt.Errorf("summary: %w", ErrCorrupt)
	}
	if len(x.days) == 0 && x.hasTime {
		return fmt.Errorf("summary: %w", ErrCorrupt)
	}
	*a = *x
	return nil
}

// The instants a state may hold: those of the years 0001-9999 that the
// schema reads (schema.ErrTimestampRange), a day either side for zones.
var (
	minInstant = time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC).UnixMicro() - 86400*usPerSec
	maxInstant = time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC).UnixMicro() + 86400*usPerSec
)
