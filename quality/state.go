package quality

import (
	"cmp"
	"encoding/binary"
	"errors"
	"fmt"
	"maps"
	"math/big"
	"math/bits"
	"slices"
	"strings"
	"time"
)

// The case-level state of an [Accumulator] used as a case observer
// (the per-case pass only: [Accumulator.Event] and [Accumulator.Case])
// is made of exact integers, so that the states of disjoint sets of cases
// merge ([Accumulator.Merge]) into what one pass over their union gives,
// byte for byte in the report, in any grouping and order:
//
//   - per site: finding counts and the rows counted per dimension, the
//     stage counts, the cases' count, durations (a 128-bit sum of µs,
//     minimum, maximum) and events, the census sums of Little's law (µs of
//     closed stays and of all stays as 128-bit sums; for the stays still
//     open, their number and the 128-bit sum of their entry instants), the
//     first and last instant (minimum and maximum), and the site's first
//     event in the pass (its case pseudonym and position in the case);
//   - per (queue, activity): the waits and those without enqueue or start;
//   - per finding: the MaxSamples first samples in the finding's order
//     (sampleCompare), which is the pass order, so one pass and a merge
//     keep the same ones.
//
// A stay still open at its case's last event stays in its site's census
// up to the site's last event: its part of the area is taken at report
// time, openN·last − Σ entry, so it is the same whether the site's last
// event came from the same group of cases or from another.
//
// Sites are listed in the order of their first event in the pass (case
// pseudonym, then position in the case), as one pass creates them; a
// merge re-sorts by that key. Beyond 256 sites a merge folds the sites of
// the latest first events into [OtherSite], as one pass does; it is exact
// only when no part held more than 256 sites itself.

// Errors of the state's encoding and merge.
var (
	// ErrState is returned by [Accumulator.UnmarshalBinary] for bytes that
	// are not a whole quality state of a known version.
	ErrState = errors.New("malformed quality state")
	// ErrStateOptions is returned when a state or an accumulator to merge
	// was taken with other case-level options (MaxCase, MaxService,
	// Terminal, MaxSamples): recompute it.
	ErrStateOptions = errors.New("quality state taken with other options")
	// ErrNotCaseLevel is returned by MarshalBinary and Merge for an
	// accumulator that saw more than the per-case pass (rejections, the
	// file-order or the time pass), or whose pass has not ended (a case in
	// hand): only case-level state is encoded and merged.
	ErrNotCaseLevel = errors.New("quality accumulator holds more than case-level state")
)

// stateMagic opens an encoded quality state; stateVersion follows it.
const (
	stateMagic   = "FCQS"
	stateVersion = 2 // 1: no waits beyond the cap (read as none)
)

// instantShift keeps instants (µs, possibly before 1970) positive in the
// unsigned sums.
const instantShift = 1 << 62

// u128 is an unsigned 128-bit sum: exact and associative.
type u128 struct{ hi, lo uint64 }

func (u *u128) add(v uint64) {
	var c uint64
	u.lo, c = bits.Add64(u.lo, v, 0)
	u.hi += c
}

func (u *u128) merge(o u128) {
	var c uint64
	u.lo, c = bits.Add64(u.lo, o.lo, 0)
	u.hi += o.hi + c
}

func (u u128) big() *big.Int {
	b := new(big.Int).SetUint64(u.hi)
	b.Lsh(b, 64)
	return b.Or(b, new(big.Int).SetUint64(u.lo))
}

// microsToSeconds returns x µs in seconds, rounded once.
func microsToSeconds(x *big.Int) float64 {
	f, _ := new(big.Rat).SetFrac(x, big.NewInt(1e6)).Float64()
	return f
}

// caseSums are the exact sums behind a site's [CaseRaw].
type caseSums struct {
	n          int64
	dur        u128  // Σ durations, µs
	minD, maxD int64 // µs
	events     int64
	minE, maxE int64
}

func (c *caseSums) add(d, events int64) {
	c.merge(&caseSums{n: 1, dur: u128{lo: uint64(d)}, minD: d, maxD: d, events: events, minE: events, maxE: events})
}

func (c *caseSums) merge(o *caseSums) {
	if o.n == 0 {
		return
	}
	if c.n == 0 {
		*c = *o
		return
	}
	c.n += o.n
	c.dur.merge(o.dur)
	c.minD, c.maxD = min(c.minD, o.minD), max(c.maxD, o.maxD)
	c.events += o.events
	c.minE, c.maxE = min(c.minE, o.minE), max(c.maxE, o.maxE)
}

func (c *caseSums) raw() CaseRaw {
	if c.n == 0 {
		return CaseRaw{}
	}
	return CaseRaw{N: c.n, DurationSeconds: microsToSeconds(c.dur.big()),
		MinSeconds: float64(c.minD) / 1e6, MaxSeconds: float64(c.maxD) / 1e6,
		Events: c.events, MinEvents: c.minE, MaxEvents: c.maxE}
}

// sampleCompare orders the samples of finding c as the passes meet them,
// so that keeping the first MaxSamples in this order does not depend on
// the order (or the grouping) in which cases were observed: case_too_long
// by case pseudonym (the per-case pass's order), a duplicate across files
// by case and instant, every other finding by source line (none last),
// then case pseudonym (see keepFirstLines). Ties are broken by every other member,
// so the order is total.
func sampleCompare(c int) func(x, y *Sample) int {
	switch c {
	case cCaseTooLong:
		return func(x, y *Sample) int {
			return cmp.Or(strings.Compare(x.CaseID, y.CaseID), strings.Compare(x.Site, y.Site), sampleRest(x, y))
		}
	case cDuplicateAcrossFiles:
		return func(x, y *Sample) int {
			return cmp.Or(strings.Compare(x.CaseID, y.CaseID), compareAt(x.At, y.At), strings.Compare(x.Site, y.Site), sampleRest(x, y))
		}
	}
	return func(x, y *Sample) int {
		return cmp.Or(cmp.Compare(sampleLine(x.Line), sampleLine(y.Line)), strings.Compare(x.CaseID, y.CaseID), sampleRest(x, y))
	}
}

func compareAt(x, y *time.Time) int {
	switch {
	case x == nil && y == nil:
		return 0
	case x == nil:
		return -1
	case y == nil:
		return 1
	}
	return x.Compare(*y)
}

// sampleRest compares every member of two samples.
func sampleRest(x, y *Sample) int {
	return cmp.Or(cmp.Compare(x.Line, y.Line), strings.Compare(x.CaseID, y.CaseID), strings.Compare(x.Site, y.Site),
		compareAt(x.At, y.At), strings.Compare(x.File, y.File), strings.Compare(x.Column, y.Column),
		strings.Compare(string(x.Field), string(y.Field)), strings.Compare(x.Text, y.Text), strings.Compare(x.Message, y.Message))
}

// keepSample keeps s among the first MaxSamples samples of finding c in
// the finding's order (sampleCompare); s's strings are cloned when kept.
func (a *Accumulator) keepSample(c int, s Sample) {
	smp := a.samples[c]
	less := sampleCompare(c)
	i := len(smp)
	for i > 0 && less(&s, &smp[i-1]) < 0 {
		i--
	}
	if i >= a.opt.MaxSamples {
		return
	}
	if len(smp) < a.opt.MaxSamples {
		smp = append(smp, Sample{})
	}
	copy(smp[i+1:], smp[i:len(smp)-1])
	s.CaseID, s.Site = strings.Clone(s.CaseID), strings.Clone(s.Site)
	smp[i] = s
	a.samples[c] = smp
}

// caseLevel reports ErrNotCaseLevel unless a holds case-level state only
// and no case in hand.
func (a *Accumulator) caseLevel() error {
	if a.cur.id != "" {
		return fmt.Errorf("%w: a case is in hand (the per-case pass has not ended)", ErrNotCaseLevel)
	}
	if a.seen || a.rejected > 0 || len(a.reasons) > 0 || a.resPeak > 0 || len(a.capPeaks) > 0 {
		return ErrNotCaseLevel
	}
	for _, s := range a.sites {
		if s.events > 0 || s.fileRows > 0 || s.lagN > 0 {
			return ErrNotCaseLevel
		}
	}
	for i := range a.emptySamples {
		if len(a.emptySamples[i]) > 0 {
			return ErrNotCaseLevel
		}
	}
	return nil
}

// fingerprint encodes the options the case-level state depends on.
func (a *Accumulator) fingerprint() []byte {
	b := binary.AppendUvarint(nil, a.maxCase)
	b = binary.AppendVarint(b, a.maxService)
	acts := slices.Sorted(maps.Keys(a.maxServiceAct))
	b = binary.AppendUvarint(b, uint64(len(acts)))
	for _, k := range acts {
		b = appendString(b, k)
		b = binary.AppendVarint(b, a.maxServiceAct[k])
	}
	b = binary.AppendUvarint(b, uint64(len(a.opt.Terminal)))
	for _, t := range a.opt.Terminal {
		b = appendString(b, string(t))
	}
	return binary.AppendUvarint(b, uint64(a.opt.MaxSamples))
}

func appendString(b []byte, s string) []byte {
	b = binary.AppendUvarint(b, uint64(len(s)))
	return append(b, s...)
}

func appendU128(b []byte, u u128) []byte {
	return binary.AppendUvarint(binary.AppendUvarint(b, u.hi), u.lo)
}

// MarshalBinary encodes the case-level state of a, an accumulator used
// as a case observer only, once its pass has ended; it fails with
// ErrNotCaseLevel otherwise. The format (version 2), all integers as
// varints (signed zig-zag, unsigned plain; a string is its length and
// bytes; a 128-bit sum is its high then low 64 bits):
//
//	"FCQS" 0x02
//	options: MaxCase µs, MaxService µs, per-activity maxima (count, then
//	  activity and µs, by activity), Terminal (count, types), MaxSamples
//	sites (count), each: name, first case, first position; finding counts
//	  (count of non-zero, then code index and count); accuracy,
//	  consistency and uniqueness rows; stage counts (cases, arrival, start,
//	  complete, departure); cases (n, Σ duration µs, min, max, Σ events,
//	  min, max); 0 or 1 then first and last instant µs; closed area, open
//	  stays, Σ their entries (shifted by 2^62), arrivals, entries, exits,
//	  Σ stays
//	waits (count), each: queue, activity, waits, no enqueue, no start, by
//	  (queue, activity); then (version 2) the waits, no enqueue and no
//	  start of the pairs beyond the cap, counted together
//	samples (count of findings with any), each: code index, count, then
//	  per sample line, case, site, file, column, field, text, message, 0
//	  or 1 then instant (Unix seconds, nanoseconds)
//
// The bytes depend only on the state, not on how it was reached: one
// pass and any merge of the same cases encode alike.
func (a *Accumulator) MarshalBinary() ([]byte, error) {
	if err := a.caseLevel(); err != nil {
		return nil, fmt.Errorf("quality: state: %w", err)
	}
	b := append([]byte(stateMagic), stateVersion)
	b = append(b, a.fingerprint()...)
	b = binary.AppendUvarint(b, uint64(len(a.sites)))
	for _, s := range a.sites {
		b = appendString(b, s.name)
		b = appendString(b, s.firstCase)
		b = binary.AppendVarint(b, s.firstOrd)
		var nz uint64
		for c := range numCodes {
			if s.n[c] != 0 {
				nz++
			}
		}
		b = binary.AppendUvarint(b, nz)
		for c := range numCodes {
			if s.n[c] != 0 {
				b = binary.AppendUvarint(b, uint64(c))
				b = binary.AppendVarint(b, s.n[c])
			}
		}
		st := &s.stages
		for _, v := range [...]int64{s.accRows, s.conRows, s.uniRows, st.cases, st.arrival, st.start, st.complete, st.departure, s.cases.n} {
			b = binary.AppendVarint(b, v)
		}
		b = appendU128(b, s.cases.dur)
		for _, v := range [...]int64{s.cases.minD, s.cases.maxD, s.cases.events, s.cases.minE, s.cases.maxE} {
			b = binary.AppendVarint(b, v)
		}
		if s.hasAt {
			b = append(b, 1)
			b = binary.AppendVarint(b, s.firstAt)
			b = binary.AppendVarint(b, s.lastAt)
		} else {
			b = append(b, 0)
		}
		b = appendU128(b, s.area)
		b = binary.AppendVarint(b, s.openN)
		b = appendU128(b, s.openEntry)
		b = binary.AppendVarint(b, s.arrivals)
		b = binary.AppendVarint(b, s.entries)
		b = binary.AppendVarint(b, s.exits)
		b = appendU128(b, s.stayed)
	}
	ws := slices.Clone(a.waits)
	slices.SortFunc(ws, func(x, y waitAcc) int {
		return cmp.Or(strings.Compare(x.key.queue, y.key.queue), strings.Compare(x.key.activity, y.key.activity))
	})
	b = binary.AppendUvarint(b, uint64(len(ws)))
	for _, w := range ws {
		b = appendString(b, w.key.queue)
		b = appendString(b, w.key.activity)
		b = binary.AppendVarint(b, w.waits)
		b = binary.AppendVarint(b, w.noEnqueue)
		b = binary.AppendVarint(b, w.noStart)
	}
	b = binary.AppendVarint(b, a.waitsBeyond.waits)
	b = binary.AppendVarint(b, a.waitsBeyond.noEnqueue)
	b = binary.AppendVarint(b, a.waitsBeyond.noStart)
	var nc uint64
	for c := range numCodes {
		if len(a.samples[c]) > 0 {
			nc++
		}
	}
	b = binary.AppendUvarint(b, nc)
	for c := range numCodes {
		if len(a.samples[c]) == 0 {
			continue
		}
		b = binary.AppendUvarint(b, uint64(c))
		b = binary.AppendUvarint(b, uint64(len(a.samples[c])))
		for _, s := range a.samples[c] {
			b = binary.AppendVarint(b, s.Line)
			for _, str := range [...]string{s.CaseID, s.Site, s.File, s.Column, string(s.Field), s.Text, s.Message} {
				b = appendString(b, str)
			}
			if s.At != nil {
				b = append(b, 1)
				b = binary.AppendVarint(b, s.At.Unix())
				b = binary.AppendUvarint(b, uint64(s.At.Nanosecond()))
			} else {
				b = append(b, 0)
			}
		}
	}
	return b, nil
}

// decoder reads a state, remembering the first problem.
type decoder struct {
	b   []byte
	off int
	err error
}

func (d *decoder) fail(what string) {
	if d.err == nil {
		d.err = fmt.Errorf("%w: %s at byte %d", ErrState, what, d.off)
	}
}

func (d *decoder) uvarint(what string) uint64 {
	if d.err != nil {
		return 0
	}
	v, n := binary.Uvarint(d.b[d.off:])
	if n <= 0 {
		d.fail(what + ": truncated or overlong varint")
		return 0
	}
	d.off += n
	return v
}

func (d *decoder) varint(what string) int64 {
	if d.err != nil {
		return 0
	}
	v, n := binary.Varint(d.b[d.off:])
	if n <= 0 {
		d.fail(what + ": truncated or overlong varint")
		return 0
	}
	d.off += n
	return v
}

func (d *decoder) byte(what string) byte {
	if d.err != nil {
		return 0
	}
	if d.off >= len(d.b) {
		d.fail(what + ": truncated")
		return 0
	}
	d.off++
	return d.b[d.off-1]
}

// count reads a count of items of at least one byte each, up to limit.
func (d *decoder) count(what string, limit int) int {
	n := d.uvarint(what)
	if d.err == nil && (n > uint64(limit) || n > uint64(len(d.b)-d.off)) {
		d.fail(fmt.Sprintf("%s: count %d out of range", what, n))
		return 0
	}
	return int(n)
}

func (d *decoder) string(what string) string {
	n := d.uvarint(what)
	if d.err != nil {
		return ""
	}
	if n > uint64(len(d.b)-d.off) {
		d.fail(what + ": truncated string")
		return ""
	}
	s := string(d.b[d.off : d.off+int(n)])
	d.off += int(n)
	return s
}

func (d *decoder) u128(what string) u128 {
	hi := d.uvarint(what)
	return u128{hi: hi, lo: d.uvarint(what)}
}

// nonNegative reads a signed count that may not be negative.
func (d *decoder) nonNegative(what string) int64 {
	v := d.varint(what)
	if v < 0 {
		d.fail(what + ": negative")
	}
	return v
}

// UnmarshalBinary replaces a's state with the case-level state b encodes
// (see [Accumulator.MarshalBinary]); a must have been made by
// [NewAccumulator] with the options the state was taken with. It fails
// with ErrState (naming the problem and its byte offset) for bytes that
// are truncated, corrupt or of an unknown version, and with
// ErrStateOptions for a state of other case-level options; a is then
// unchanged.
func (a *Accumulator) UnmarshalBinary(b []byte) error {
	if len(b) < len(stateMagic)+1 || string(b[:len(stateMagic)]) != stateMagic {
		return fmt.Errorf("quality: state: %w: no FCQS header", ErrState)
	}
	v := b[len(stateMagic)]
	if v != stateVersion && v != 1 {
		return fmt.Errorf("quality: state: %w: version %d, this release reads 1 and %d", ErrState, v, stateVersion)
	}
	fresh := NewAccumulator(a.opt)
	fresh.seed = a.seed
	fp := fresh.fingerprint()
	d := &decoder{b: b, off: len(stateMagic) + 1}
	if len(b)-d.off < len(fp) {
		return fmt.Errorf("quality: state: %w: truncated in its options", ErrState)
	}
	if string(b[d.off:d.off+len(fp)]) != string(fp) {
		return fmt.Errorf("quality: state: %w", ErrStateOptions)
	}
	d.off += len(fp)
	ns := d.count("sites", MaxSites+1)
	for range ns {
		name := d.string("site name")
		if _, dup := fresh.siteIndex[name]; dup && d.err == nil {
			d.fail("site listed twice")
		}
		s := &siteAcc{name: name, idx: len(fresh.sites)}
		s.firstCase = d.string("first case")
		s.firstOrd = d.nonNegative("first position")
		nz := d.count("finding counts", int(numCodes))
		for range nz {
			c := d.uvarint("finding code")
			if c >= numCodes {
				d.fail("finding code out of range")
				break
			}
			s.n[c] = d.nonNegative("finding count")
		}
		st := &s.stages
		for _, p := range [...]*int64{&s.accRows, &s.conRows, &s.uniRows, &st.cases, &st.arrival, &st.start, &st.complete, &st.departure, &s.cases.n} {
			*p = d.nonNegative("count")
		}
		s.cases.dur = d.u128("case durations")
		for _, p := range [...]*int64{&s.cases.minD, &s.cases.maxD, &s.cases.events, &s.cases.minE, &s.cases.maxE} {
			*p = d.nonNegative("case figures")
		}
		switch d.byte("instants") {
		case 0:
		case 1:
			s.hasAt = true
			s.firstAt = d.varint("first instant")
			s.lastAt = d.varint("last instant")
			if s.firstAt > s.lastAt {
				d.fail("first instant after last")
			}
		default:
			d.fail("instants flag not 0 or 1")
		}
		s.area = d.u128("census area")
		s.openN = d.nonNegative("open stays")
		s.openEntry = d.u128("open entries")
		s.arrivals = d.nonNegative("arrivals")
		s.entries = d.nonNegative("entries")
		s.exits = d.nonNegative("exits")
		s.stayed = d.u128("stays")
		if d.err != nil {
			break
		}
		fresh.sites = append(fresh.sites, s)
		fresh.siteIndex[name] = s.idx
	}
	nw := d.count("waits", maxKeys)
	for range nw {
		k := waitKey{d.string("queue"), d.string("activity")}
		w := waitAcc{key: k, waits: d.nonNegative("waits"), noEnqueue: d.nonNegative("no enqueue"), noStart: d.nonNegative("no start")}
		if _, dup := fresh.waitIndex[k]; dup && d.err == nil {
			d.fail("wait listed twice")
		}
		if d.err != nil {
			break
		}
		fresh.waitIndex[k] = int32(len(fresh.waits))
		fresh.waits = append(fresh.waits, w)
		fresh.waitBytes += len(k.queue) + len(k.activity)
	}
	if v >= 2 {
		fresh.waitsBeyond = waitAcc{waits: d.nonNegative("waits beyond the cap"), noEnqueue: d.nonNegative("no enqueue beyond the cap"),
			noStart: d.nonNegative("no start beyond the cap")}
	}
	nc := d.count("findings with samples", int(numCodes))
	for range nc {
		c := d.uvarint("sample code")
		if d.err == nil && (c >= numCodes || len(fresh.samples[c]) > 0) {
			d.fail("sample code out of range or repeated")
		}
		n := d.count("samples", fresh.opt.MaxSamples)
		for range n {
			s := Sample{Line: d.varint("sample line")}
			for _, p := range [...]*string{&s.CaseID, &s.Site, &s.File, &s.Column, (*string)(&s.Field), &s.Text, &s.Message} {
				*p = d.string("sample text")
			}
			switch d.byte("sample instant") {
			case 0:
			case 1:
				sec := d.varint("sample instant")
				ns := d.uvarint("sample instant")
				if ns >= 1e9 {
					d.fail("sample nanoseconds out of range")
				}
				at := time.Unix(sec, int64(ns)).UTC()
				s.At = &at
			default:
				d.fail("sample instant flag not 0 or 1")
			}
			if d.err != nil {
				break
			}
			fresh.samples[c] = append(fresh.samples[c], s)
		}
		if d.err != nil {
			break
		}
	}
	if d.err == nil && d.off != len(b) {
		d.fail(fmt.Sprintf("%d bytes after the state", len(b)-d.off))
	}
	if d.err != nil {
		return fmt.Errorf("quality: state: %w", d.err)
	}
	*a = *fresh
	return nil
}

// Merge adds to a the case-level state of o, which observed a disjoint
// set of cases with the same case-level options, as if a had observed
// o's cases too: a's report then equals, byte for byte, that of one
// accumulator that observed both sets in one pass, in any grouping and
// order of merges (see the state's description above), while the two
// tell apart at most 65,536 (queue, activity) pairs together; beyond that
// a keeps its own and adds o's only up to the cap, so which pairs are
// told apart then depends on the order (one pass keeps the first it
// meets). It fails with
// ErrNotCaseLevel if either holds more than case-level state, and with
// ErrStateOptions if their options differ; a is then unchanged. o is not
// changed.
func (a *Accumulator) Merge(o *Accumulator) error {
	if err := a.caseLevel(); err != nil {
		return fmt.Errorf("quality: merge: %w", err)
	}
	if err := o.caseLevel(); err != nil {
		return fmt.Errorf("quality: merge: %w", err)
	}
	if string(a.fingerprint()) != string(o.fingerprint()) {
		return fmt.Errorf("quality: merge: %w", ErrStateOptions)
	}
	byName := map[string]*siteAcc{}
	all := slices.Clone(a.sites)
	for _, s := range all {
		byName[s.name] = s
	}
	for _, s := range o.sites {
		d := byName[s.name]
		if d == nil {
			d = &siteAcc{name: s.name, firstCase: s.firstCase, firstOrd: s.firstOrd}
			byName[s.name] = d
			all = append(all, d)
		}
		addSite(d, s)
	}
	a.setSites(all)
	for _, w := range o.waits {
		i, ok := a.waitIndex[w.key]
		if !ok {
			if keyRoom(len(a.waits), a.waitBytes, len(w.key.queue)+len(w.key.activity)) {
				a.waitBytes += len(w.key.queue) + len(w.key.activity)
				i = int32(len(a.waits))
				a.waits = append(a.waits, waitAcc{key: w.key})
				a.waitIndex[w.key] = i
			} else {
				i = waitBeyond // beyond the cap, as in one pass: counted together
			}
		}
		a.waitAt(i).add(&w)
	}
	a.waitsBeyond.add(&o.waitsBeyond)
	a.waitCache = 0
	for c := range numCodes {
		if len(o.samples[c]) == 0 {
			continue
		}
		smp := append(slices.Clone(a.samples[c]), o.samples[c]...)
		order := sampleCompare(c)
		slices.SortStableFunc(smp, func(x, y Sample) int { return order(&x, &y) })
		smp = slices.CompactFunc(smp, func(x, y Sample) bool { return order(&x, &y) == 0 })
		a.samples[c] = smp[:min(len(smp), a.opt.MaxSamples)]
	}
	return nil
}

// siteBefore orders sites by their first event in the per-case pass.
func siteBefore(x, y *siteAcc) int {
	return cmp.Or(strings.Compare(x.firstCase, y.firstCase), cmp.Compare(x.firstOrd, y.firstOrd), strings.Compare(x.name, y.name))
}

// setSites makes all a's sites, in the order of their first event; beyond
// MaxSites, the sites of the latest first events are counted under
// OtherSite, as one pass counts them.
func (a *Accumulator) setSites(all []*siteAcc) {
	slices.SortFunc(all, siteBefore)
	var other *siteAcc
	named := all[:0:0]
	for _, s := range all {
		if s.name == OtherSite {
			other = s
		} else {
			named = append(named, s)
		}
	}
	if len(named) > MaxSites {
		for _, s := range named[MaxSites:] {
			if other == nil {
				other = &siteAcc{name: OtherSite, firstCase: s.firstCase, firstOrd: s.firstOrd}
			}
			addSite(other, s)
		}
		named = named[:MaxSites]
	}
	if other != nil {
		named = append(named, other)
		slices.SortFunc(named, siteBefore)
	}
	a.sites = named
	clear(a.siteIndex)
	for i, s := range a.sites {
		s.idx = i
		a.siteIndex[s.name] = i
	}
	a.siteCache = [4]*siteAcc{}
	a.siteNext = 0
}

// addSite adds the case-level counts of s to d.
func addSite(d, s *siteAcc) {
	if siteBefore(s, d) < 0 {
		d.firstCase, d.firstOrd = s.firstCase, s.firstOrd
	}
	for c := range numCodes {
		d.n[c] += s.n[c]
	}
	d.accRows += s.accRows
	d.conRows += s.conRows
	d.uniRows += s.uniRows
	d.stages.cases += s.stages.cases
	d.stages.arrival += s.stages.arrival
	d.stages.start += s.stages.start
	d.stages.complete += s.stages.complete
	d.stages.departure += s.stages.departure
	d.cases.merge(&s.cases)
	if s.hasAt {
		if !d.hasAt {
			d.hasAt, d.firstAt, d.lastAt = true, s.firstAt, s.lastAt
		}
		d.firstAt = min(d.firstAt, s.firstAt)
		d.lastAt = max(d.lastAt, s.lastAt)
	}
	d.area.merge(s.area)
	d.openN += s.openN
	d.openEntry.merge(s.openEntry)
	d.arrivals += s.arrivals
	d.entries += s.entries
	d.exits += s.exits
	d.stayed.merge(s.stayed)
}
