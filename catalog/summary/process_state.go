package summary

import (
	"cmp"
	"encoding/binary"
	"maps"
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

// above reports whether r ranks above the threshold thr (nil: none yet).
func above(thr *keyRank, r keyRank) bool { return thr != nil && r.compare(*thr) > 0 }

// trim keeps the limit keys of m of lowest rank, deletes the others and
// returns their summed counts; *thr becomes the highest rank kept (or
// stays, when lower). A key above it is never among the lowest limit
// keys of any union holding m's, so it may go to "other" at once.
func trim[K comparable](m map[K]uint64, limit int, rank func(K) keyRank, thr **keyRank) uint64 {
	if len(m) <= limit {
		return 0
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
	var other uint64
	for _, x := range all[limit:] {
		other += m[x.k]
		delete(m, x.k)
	}
	if t := all[limit-1].r; *thr == nil || t.compare(**thr) < 0 {
		*thr = &t
	}
	return other
}

// trimFollows trims the directly-follows pairs to the cap.
func (p *ProcessObserver) trimFollows() {
	n := make(map[[2]string]uint64, len(p.follows))
	for k := range p.follows {
		n[k] = p.followsN[k]
	}
	p.otherF += trim(n, maxFollows, pairRank, &p.thrF)
	for k := range p.follows {
		if _, ok := n[k]; !ok {
			delete(p.follows, k)
			delete(p.followsN, k)
		}
	}
}

// normalize trims every view to its cap.
func (p *ProcessObserver) normalize() {
	if len(p.follows) > maxFollows {
		p.trimFollows()
	}
	p.otherV += trim(p.variants, maxVariants, stringRank, &p.thrV)
	p.otherW += trim(p.work, maxWorkload, workRank, &p.thrW)
	p.otherH += trim(p.hand, maxHandovers, pairRank, &p.thrH)
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
