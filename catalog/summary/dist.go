package summary

import (
	"maps"
	"math"
	"math/big"
	"math/bits"
	"slices"
)

// Durations are kept in microseconds, the precision of the snapshots.
const usPerSec = 1e6

// sketchAlpha is the relative error of a collapsed distribution: a value v
// falls in bucket i = ⌈ln v / ln γ⌉ with γ = (1+α)/(1-α) and is represented
// by 2γ^i/(γ+1), within a factor 1±α of v.
const sketchAlpha = 0.005

var (
	sketchGamma    = (1 + sketchAlpha) / (1 - sketchAlpha)
	sketchLogGamma = math.Log(sketchGamma)
)

// u128 is an unsigned 128-bit sum: exact and associative, so merged sums
// equal one-pass sums bit for bit.
type u128 struct{ hi, lo uint64 }

func (u *u128) add(v uint64) {
	var c uint64
	u.lo, c = bits.Add64(u.lo, v, 0)
	u.hi += c
}

func (u *u128) addSq(v uint64) {
	h, l := bits.Mul64(v, v)
	var c uint64
	u.lo, c = bits.Add64(u.lo, l, 0)
	u.hi += h + c
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

func (u u128) float() float64 { return float64(u.hi)*0x1p64 + float64(u.lo) }

// dist is a mergeable distribution of non-negative durations in
// microseconds: exact value counts while there are at most cap distinct
// values, then log buckets of relative error sketchAlpha. Count, sum, sum
// of squares, minimum and maximum stay exact in both forms.
type dist struct {
	n, zero    uint64
	sum, sumsq u128
	min, max   int64
	exact      map[int64]uint64 // positive values; nil once collapsed
	sk         []uint64         // collapsed: bucket skLo+i holds sk[i]
	skLo       int32
	// lq and lq2 are the sums of q = round(ln(v µs) · 2^42) and of q²
	// over the positive values: exact integers, so they merge bit for bit,
	// and the lognormal MLE needs nothing else (each logarithm is kept to
	// 2^-43, about 1e-13).
	lq, lq2 u128
}

// lnScale is the fixed-point scale of the logarithms summed by dist.
const lnScale = 1 << 42

func lnQ(v int64) uint64 { return uint64(math.Round(math.Log(float64(v)) * lnScale)) }

func newDist() *dist { return &dist{exact: map[int64]uint64{}} }

func bucketOf(v int64) int32 { return int32(math.Ceil(math.Log(float64(v)) / sketchLogGamma)) }

func bucketValue(i int32) float64 { return 2 * math.Pow(sketchGamma, float64(i)) / (sketchGamma + 1) }

// add counts v >= 0 microseconds; cap is the most distinct values kept exactly.
func (d *dist) add(v int64, cap int) {
	if d.n == 0 || v < d.min {
		d.min = v
	}
	if d.n == 0 || v > d.max {
		d.max = v
	}
	d.n++
	d.sum.add(uint64(v))
	d.sumsq.addSq(uint64(v))
	if v == 0 {
		d.zero++
		return
	}
	q := lnQ(v)
	d.lq.add(q)
	d.lq2.addSq(q)
	if d.exact != nil {
		d.exact[v]++
		if len(d.exact) > cap {
			d.collapse()
		}
		return
	}
	d.addBucket(bucketOf(v), 1)
}

func (d *dist) addBucket(i int32, c uint64) {
	if len(d.sk) == 0 {
		d.skLo = i
		d.sk = append(d.sk[:0], c)
		return
	}
	if i < d.skLo {
		grow := int(d.skLo - i)
		d.sk = append(make([]uint64, grow, grow+len(d.sk)), d.sk...)
		d.skLo = i
	}
	j := int(i - d.skLo)
	for j >= len(d.sk) {
		d.sk = append(d.sk, 0)
	}
	d.sk[j] += c
}

// collapse turns exact counts into buckets; the result equals adding each
// value to buckets directly, so it does not matter when it happens.
func (d *dist) collapse() {
	for _, v := range slices.Sorted(maps.Keys(d.exact)) {
		d.addBucket(bucketOf(v), d.exact[v])
	}
	d.exact = nil
}

func (d *dist) merge(o *dist, cap int) {
	if o.n == 0 {
		return
	}
	if d.n == 0 || o.min < d.min {
		d.min = o.min
	}
	if d.n == 0 || o.max > d.max {
		d.max = o.max
	}
	d.n += o.n
	d.zero += o.zero
	d.sum.merge(o.sum)
	d.sumsq.merge(o.sumsq)
	d.lq.merge(o.lq)
	d.lq2.merge(o.lq2)
	if d.exact != nil && o.exact != nil {
		for v, c := range o.exact {
			d.exact[v] += c
		}
		if len(d.exact) > cap {
			d.collapse()
		}
		return
	}
	if d.exact != nil {
		d.collapse()
	}
	if o.exact != nil {
		for v, c := range o.exact {
			d.addBucket(bucketOf(v), c)
		}
		return
	}
	for i, c := range o.sk {
		if c > 0 {
			d.addBucket(o.skLo+int32(i), c)
		}
	}
}

// points lists the distinct values in seconds (bucket representatives
// once collapsed), ascending, with their counts.
func (d *dist) points() []valueCount {
	var out []valueCount
	if d.zero > 0 {
		out = append(out, valueCount{0, d.zero})
	}
	if d.exact != nil {
		for _, v := range slices.Sorted(maps.Keys(d.exact)) {
			out = append(out, valueCount{float64(v) / usPerSec, d.exact[v]})
		}
		return out
	}
	for i, c := range d.sk {
		if c > 0 {
			out = append(out, valueCount{bucketValue(d.skLo+int32(i)) / usPerSec, c})
		}
	}
	return out
}

// bucketKeys lists (bucket, count) of the positive values, for combining
// two distributions on a common grid when either is collapsed.
func (d *dist) bucketPoints() map[int32]uint64 {
	m := map[int32]uint64{}
	if d.exact != nil {
		for v, c := range d.exact {
			m[bucketOf(v)] += c
		}
		return m
	}
	for i, c := range d.sk {
		if c > 0 {
			m[d.skLo+int32(i)] += c
		}
	}
	return m
}

// meanSD returns the mean and the sample standard deviation (n-1 in the
// denominator) in seconds, from the exact integer sums.
func (d *dist) meanSD() (mean, sd float64) {
	if d.n == 0 {
		return 0, 0
	}
	mean = d.sum.float() / float64(d.n) / usPerSec
	if d.n < 2 {
		return mean, 0
	}
	n := new(big.Int).SetUint64(d.n)
	num := new(big.Int).Mul(n, d.sumsq.big())
	s := d.sum.big()
	num.Sub(num, s.Mul(s, s))
	den := new(big.Int).Mul(n, new(big.Int).SetUint64(d.n-1))
	v, _ := new(big.Rat).SetFrac(num, den).Float64()
	return mean, math.Sqrt(v) / usPerSec
}
