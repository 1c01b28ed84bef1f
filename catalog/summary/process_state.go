package summary

import (
	"cmp"
	"encoding/binary"
	"maps"
	"math"
	"slices"
)

// keyRank orders the keys of a capped view: a fixed hash of the key
// (hashString), then the key's bytes.
type keyRank struct {
	h uint64
	s string
}

func (r keyRank) compare(o keyRank) int { return cmp.Or(cmp.Compare(r.h, o.h), cmp.Compare(r.s, o.s)) }

func stringRank(k string) keyRank { return keyRank{hashString(k), k} }

func pairRank(k [2]string) keyRank {
	s := k[0] + "\x00" + k[1]
	return keyRank{hashString(s), s}
}

func workRank(k workKey) keyRank {
	s := string(binary.BigEndian.AppendUint32([]byte(k.res+"\x00"), uint32(k.day)))
	return keyRank{hashString(s), s}
}

// above reports whether r ranks at or above the threshold thr (nil: none
// yet), the rank of the first key a trim dropped.
func above(thr *keyRank, r keyRank) bool { return thr != nil && r.compare(*thr) >= 0 }

// trim keeps the keys of m of lowest rank, at most limit of them and of
// at most budget bytes (size), below *thr, deletes the others and returns
// their summed counts and the bytes of the keys kept; *thr becomes the
// rank of the first key dropped (or stays, when lower). The keys of a
// union ranked below the first key any part dropped are all kept by every
// part, and the union's keys within the bounds rank below it (those of
// that part up to it are over a bound already): so a key at or above *thr
// may go to "other" at once, and a merge trims to exactly what one pass
// over the union keeps.
func trim[K comparable](m map[K]uint64, limit, budget int, rank func(K) keyRank, size func(K) int, thr **keyRank) (uint64, int) {
	total, over := 0, false
	for k := range m {
		total += size(k)
		over = over || *thr != nil && above(*thr, rank(k))
	}
	if len(m) <= limit && total <= budget && !over {
		return 0, total
	}
	type kr struct {
		k K
		r keyRank
	}
	all := make([]kr, 0, len(m))
	for k := range m {
		all = append(all, kr{k, rank(k)})
	}
	slices.SortFunc(all, func(x, y kr) int { return x.r.compare(y.r) })
	n, kept := 0, 0
	for n < len(all) && n < limit && kept+size(all[n].k) <= budget && !above(*thr, all[n].r) {
		kept += size(all[n].k)
		n++
	}
	var other uint64
	for _, x := range all[n:] {
		other += m[x.k]
		delete(m, x.k)
	}
	if n < len(all) && (*thr == nil || all[n].r.compare(**thr) < 0) {
		t := all[n].r
		*thr = &t
	}
	return other, kept
}

// trimCount is trim by count alone, for keys of bounded size.
func trimCount[K comparable](m map[K]uint64, limit int, rank func(K) keyRank, thr **keyRank) uint64 {
	other, _ := trim(m, limit, math.MaxInt, rank, func(K) int { return 0 }, thr)
	return other
}

func pairBytes(k [2]string) int { return len(k[0]) + len(k[1]) }
func stringBytes(k string) int  { return len(k) }

// trimFollows trims the directly-follows pairs to their caps.
func (p *ProcessObserver) trimFollows() {
	if p.thrF == nil && len(p.follows) <= maxFollows {
		size := 0
		for k := range p.follows {
			size += pairBytes(k)
		}
		if size <= maxFollowBytes {
			p.bytesF = size
			return // within both caps, nothing trimmed yet: nothing to do
		}
	}
	n := make(map[[2]string]uint64, len(p.follows))
	for k := range p.follows {
		n[k] = p.followsN[k]
	}
	other, kept := trim(n, maxFollows, maxFollowBytes, pairRank, pairBytes, &p.thrF)
	p.otherF += other
	p.bytesF = kept
	for k := range p.follows {
		if _, ok := n[k]; !ok {
			delete(p.follows, k)
			delete(p.followsN, k)
		}
	}
}

// trimVariants trims the variants to their caps.
func (p *ProcessObserver) trimVariants() {
	other, kept := trim(p.variants, maxVariants, maxVariantBytes, stringRank, stringBytes, &p.thrV)
	p.otherV += other
	p.bytesV = kept
}

// normalize trims every view to its caps.
func (p *ProcessObserver) normalize() {
	p.trimFollows()
	p.trimVariants()
	p.otherW += trimCount(p.work, maxWorkload, workRank, &p.thrW)
	p.otherH += trimCount(p.hand, maxHandovers, pairRank, &p.thrH)
}

// minRank is the lower of two thresholds (nil: none).
func minRank(x, y *keyRank) *keyRank {
	switch {
	case x == nil:
		return y
	case y == nil:
		return x
	case y.compare(*x) < 0:
		return y
	}
	return x
}

// merge adds o's counts to p: o observed other cases, between cases.
func (p *ProcessObserver) merge(o *ProcessObserver) {
	for k, d := range o.follows {
		x := p.follows[k]
		if x == nil {
			x = newDist()
			p.follows[k] = x
		}
		x.merge(d, p.a.cap)
		p.followsN[k] += o.followsN[k]
	}
	p.otherF += o.otherF
	for k, n := range o.variants {
		p.variants[k] += n
	}
	p.otherV += o.otherV
	p.cases += o.cases
	for k, n := range o.work {
		p.work[k] += n
	}
	p.otherW += o.otherW
	for k, n := range o.hand {
		p.hand[k] += n
	}
	p.otherH += o.otherH
	p.thrF, p.thrV = minRank(p.thrF, o.thrF), minRank(p.thrV, o.thrV)
	p.thrW, p.thrH = minRank(p.thrW, o.thrW), minRank(p.thrH, o.thrH)
	p.normalize()
}

// Process returns the process observer bound to a, made on the first
// call: a per-case pass feeds it beside a (as a [cases.Observer]), its
// views are the summary's `process` member, and it is part of a's state:
// [Accumulator.MarshalBinary] encodes it, [Accumulator.UnmarshalBinary]
// restores it and [Accumulator.Merge] merges it (an accumulator without
// one, such as a file's event-level state, adds nothing to it).
func (a *Accumulator) Process() *ProcessObserver {
	if a.process == nil {
		a.process = a.NewProcess()
	}
	return a.process
}

// process encodes p (format 5; see MarshalBinary): the counts beyond the
// caps and the cases, then each view in key order.
func (e *enc) process(p *ProcessObserver) {
	p.normalize()
	e.uv(p.cases)
	e.uv(p.otherF)
	e.uv(p.otherV)
	e.uv(p.otherW)
	e.uv(p.otherH)
	fk := slices.SortedFunc(maps.Keys(p.follows), func(x, y [2]string) int {
		return cmp.Or(cmp.Compare(x[0], y[0]), cmp.Compare(x[1], y[1]))
	})
	e.uv(uint64(len(fk)))
	for _, k := range fk {
		e.str(k[0])
		e.str(k[1])
		e.uv(p.followsN[k])
		e.dist(p.follows[k])
	}
	vk := slices.Sorted(maps.Keys(p.variants))
	e.uv(uint64(len(vk)))
	for _, k := range vk {
		e.str(k)
		e.uv(p.variants[k])
	}
	wk := slices.SortedFunc(maps.Keys(p.work), func(x, y workKey) int {
		return cmp.Or(cmp.Compare(x.res, y.res), cmp.Compare(x.day, y.day))
	})
	e.uv(uint64(len(wk)))
	for _, k := range wk {
		e.str(k.res)
		e.iv(int64(k.day))
		e.uv(p.work[k])
	}
	hk := slices.SortedFunc(maps.Keys(p.hand), func(x, y [2]string) int {
		return cmp.Or(cmp.Compare(x[0], y[0]), cmp.Compare(x[1], y[1]))
	})
	e.uv(uint64(len(hk)))
	for _, k := range hk {
		e.str(k[0])
		e.str(k[1])
		e.uv(p.hand[k])
	}
}

// process decodes what enc.process wrote into a new observer of a.
func (d *dec) process(a *Accumulator) *ProcessObserver {
	p := a.NewProcess()
	p.cases, p.otherF, p.otherV, p.otherW, p.otherH = d.uv(), d.uv(), d.uv(), d.uv(), d.uv()
	for range d.count(3) {
		k := [2]string{d.str(), d.str()}
		if _, dup := p.follows[k]; dup {
			d.fail()
		}
		p.followsN[k] = d.uv()
		p.follows[k] = d.dist()
	}
	for range d.count(2) {
		k := d.str()
		if _, dup := p.variants[k]; dup {
			d.fail()
		}
		p.variants[k] = d.uv()
	}
	for range d.count(3) {
		k := workKey{d.str(), int32(d.iv())}
		if _, dup := p.work[k]; dup {
			d.fail()
		}
		p.work[k] = d.uv()
	}
	for range d.count(3) {
		k := [2]string{d.str(), d.str()}
		if _, dup := p.hand[k]; dup {
			d.fail()
		}
		p.hand[k] = d.uv()
	}
	if len(p.follows) > maxFollows || len(p.variants) > maxVariants || len(p.work) > maxWorkload || len(p.hand) > maxHandovers {
		d.fail()
	}
	return p
}
