package summary

import (
	"maps"
	"math"
	"math/bits"
	"slices"
)

// Distinct counting: exact while at most distinctCap distinct values have
// been seen, then a HyperLogLog of 2^hllP one-byte registers whose relative
// standard error is 1.04/sqrt(2^hllP) ≈ 0.81%. Values are 64-bit hashes of
// the pseudonyms (hashString), fixed across processes so that merged
// counters agree.
const (
	distinctCap = 4096
	hllP        = 14
	hllM        = 1 << hllP
)

// HLLRelStdError is the relative standard error of a distinct count that
// is no longer exact.
var HLLRelStdError = 1.04 / math.Sqrt(hllM)

type distinct struct {
	set map[uint64]struct{} // nil once a sketch
	reg []uint8
}

func newDistinct() *distinct { return &distinct{set: map[uint64]struct{}{}} }

func (d *distinct) add(h uint64) {
	if d.set != nil {
		d.set[h] = struct{}{}
		if len(d.set) > distinctCap {
			d.toSketch()
		}
		return
	}
	d.addReg(h)
}

func (d *distinct) addReg(h uint64) {
	i := h >> (64 - hllP)
	r := uint8(bits.LeadingZeros64(h<<hllP|1<<(hllP-1)) + 1)
	if r > d.reg[i] {
		d.reg[i] = r
	}
}

func (d *distinct) toSketch() {
	d.reg = make([]uint8, hllM)
	for h := range d.set {
		d.addReg(h)
	}
	d.set = nil
}

func (d *distinct) merge(o *distinct) {
	if d.set != nil && o.set != nil {
		for h := range o.set {
			d.add(h)
		}
		return
	}
	if d.set != nil {
		d.toSketch()
	}
	if o.set != nil {
		for h := range o.set {
			d.addReg(h)
		}
		return
	}
	for i, r := range o.reg {
		d.reg[i] = max(d.reg[i], r)
	}
}

// count is the exact count, or the HyperLogLog estimate by the improved
// raw estimator of Ertl (2017), nearly unbiased over the whole range
// without empirical bias tables.
func (d *distinct) count() (n float64, exact bool) {
	if d.set != nil {
		return float64(len(d.set)), true
	}
	const q = 64 - hllP
	var c [q + 2]float64
	for _, r := range d.reg {
		c[min(int(r), q+1)]++
	}
	m := float64(hllM)
	z := m * hllTau(1-c[q+1]/m)
	for k := q; k >= 1; k-- {
		z = 0.5 * (z + c[k])
	}
	z += m * hllSigma(c[0]/m)
	return math.Round(m * m / (2 * math.Ln2) / z), false
}

func hllSigma(x float64) float64 {
	if x == 1 {
		return math.Inf(1)
	}
	y, z := 1.0, x
	for {
		x *= x
		prev := z
		z += x * y
		y += y
		if z == prev {
			return z
		}
	}
}

func hllTau(x float64) float64 {
	if x == 0 || x == 1 {
		return 0
	}
	y, z := 1.0, 1-x
	for {
		x = math.Sqrt(x)
		prev := z
		y *= 0.5
		z -= (1 - x) * (1 - x) * y
		if z == prev {
			return z / 3
		}
	}
}

func (d *distinct) sortedSet() []uint64 { return slices.Sorted(maps.Keys(d.set)) }

// hashString is a fixed 64-bit hash (8 bytes at a time, murmur3's
// finalizer for avalanche), the same in every process.
func hashString(s string) uint64 {
	const m = 0x9e3779b97f4a7c15
	h := uint64(len(s))*m ^ 0x5ca1ab1e0ddba11
	for len(s) >= 8 {
		v := uint64(s[0]) | uint64(s[1])<<8 | uint64(s[2])<<16 | uint64(s[3])<<24 |
			uint64(s[4])<<32 | uint64(s[5])<<40 | uint64(s[6])<<48 | uint64(s[7])<<56
		h = bits.RotateLeft64((h^v)*m, 29) * 0xbf58476d1ce4e5b9
		s = s[8:]
	}
	var v uint64
	for i := 0; i < len(s); i++ {
		v |= uint64(s[i]) << (8 * i)
	}
	h = bits.RotateLeft64((h^v)*m, 29) * 0xbf58476d1ce4e5b9
	h ^= h >> 33
	h *= 0xff51afd7ed558ccd
	h ^= h >> 33
	h *= 0xc4ceb9fe1a85ec53
	h ^= h >> 33
	return h
}
