package catalog

import (
	"hash/maphash"

	"github.com/parquet-go/parquet-go/bloom"

	"github.com/flowcat-catalog/flowcat/schema"
)

// uploadIdentities records, while an upload is read, the identity of each
// of its events (identityHash: the 64-bit hash of appendIdentity's bytes
// under its seed, which the held filter computes anyway) in a Bloom
// filter that grows in layers, and the identities
// it meets a second time in another. The held filter then keeps, of the upload's events, only those
// whose identity is among these repeats in its window (no other can be
// found there again), and, with stable event ids, takes into its window
// of held events only those whose identity the upload may have (with
// content identity that window is one instant, and the first filter is
// dropped once the file is read: dropFilter).
// Each filter answers "maybe" for some identities it never met (about 1%
// of them a layer once full, 0.1% for the repeats, and those whose 64-bit
// hash is another's): such an event is kept when it need not be, which
// costs memory, never a result. Neither answers "no" for one it met, so
// nothing the window must find is left out.
//
// Memory: 11 bits an identity and 17 a repeat (the layers double, so at
// most twice that; 1.4 MB at least), and at most 24 MiB in all.
type uploadIdentities struct {
	id      Identity
	dropped bool // the first filter is gone: mayHold answers "maybe"
	seed    maphash.Seed
	all     layeredBloom // every identity
	repeats layeredBloom // the identities met twice or more
	buf     []byte
}

// identityBits and repeatBits are the bits a layer of each filter gives
// an identity: split-block filters (bloom.SplitBlockFilter, the Parquet
// format's own: the 8 bits of a key in one 32-byte block, so one memory
// read a test where a classic filter at 1% makes 7) answer "maybe" for
// about 0.85% and 0.09% of the keys they never met when full (measured
// over 4M keys not added to 1M: 10 bits 1.27%, 12 bits 0.54%, 16 bits
// 0.13%, 18 bits 0.07%). The repeats are few in most uploads, and each
// false one costs a place in the held filter's window.
const (
	identityBits = 11
	repeatBits   = 17
)

// firstIdentities is the first layer's capacity (1.4 MB) of the filter of
// all identities, firstRepeats of the repeats' (139 kB); each next layer
// doubles the one before. Variables for tests.
var (
	firstIdentities uint = 1 << 20
	firstRepeats    uint = 1 << 16
)

// maxIdentityBits and maxRepeatBits bound each filter's layers (16 and 8
// MiB): a filter that would grow past its bound fills its newest layer
// beyond that layer's capacity instead, and its false positives rise
// (over about 7 million identities, or 2 million repeats). A false "maybe"
// only puts an event in the held filter's windows, which hold their own
// bound (Options.ChangeWindowBytes).
const (
	maxIdentityBits = 16 << 20 * 8
	maxRepeatBits   = 8 << 20 * 8
)

// newUploadIdentities records identities under id.
func newUploadIdentities(id Identity) *uploadIdentities {
	return &uploadIdentities{id: id, seed: maphash.MakeSeed(),
		all:     layeredBloom{first: firstIdentities, bitsPer: identityBits, maxBits: maxIdentityBits},
		repeats: layeredBloom{first: firstRepeats, bitsPer: repeatBits, maxBits: maxRepeatBits}}
}

// add records the identity of e, one of the upload's events.
func (u *uploadIdentities) add(e *schema.Event) {
	h := identityHash(u.seed, &u.buf, u.id, e)
	if u.all.testOrAdd(h) {
		u.repeats.testOrAdd(h)
	}
}

// mayHold reports whether the identity whose hash (identityHash under the
// filter's seed) is h may be that of one of the upload's events: false
// only if it is not.
func (u *uploadIdentities) mayHold(h uint64) bool {
	if u.dropped {
		return true
	}
	return u.all.test(h)
}

// dropFilter frees the filter of all identities once the file is read,
// keeping the repeats; mayHold then answers "maybe" to every identity.
func (u *uploadIdentities) dropFilter() { u.all, u.dropped = layeredBloom{}, true }

// repeated reports whether the identity whose hash is h may be that of two
// or more of the upload's events: false only if it is not.
func (u *uploadIdentities) repeated(h uint64) bool {
	return u.repeats.test(h)
}

// layeredBloom is a Bloom filter that grows: split-block layers of
// doubling capacity (from first), each giving bitsPer bits a key; a key
// is tested in each. Keys are 64-bit hashes already (the filters'
// blocks are chosen by the top 32 bits, a block's bits by the low 32).
type layeredBloom struct {
	first   uint
	bitsPer uint
	maxBits uint // the layers' bits at most: past it the newest layer overfills
	bits    uint
	layers  []bloom.SplitBlockFilter
	n, cap  uint // keys added to the newest layer, and its capacity
}

// testOrAdd reports whether key may have been added before, and adds it
// if not (to the newest layer).
func (b *layeredBloom) testOrAdd(key uint64) bool {
	if len(b.layers) > 0 && b.n >= b.cap {
		next := max(2*b.cap, b.first)
		if b.bits+layerBits(next, b.bitsPer) > b.maxBits {
			b.cap = ^uint(0) // the newest takes the rest
		}
	}
	if b.test(key) {
		return true
	}
	if len(b.layers) == 0 || b.n >= b.cap {
		b.cap = max(2*b.cap, b.first)
		l := make(bloom.SplitBlockFilter, bloom.NumSplitBlocksOf(int64(b.cap), b.bitsPer))
		b.bits += layerBits(b.cap, b.bitsPer)
		b.layers = append(b.layers, l)
		b.n = 0
	}
	b.layers[len(b.layers)-1].Insert(key)
	b.n++
	return false
}

// layerBits is the bits of a layer of n keys at bitsPer bits each.
func layerBits(n, bitsPer uint) uint {
	return uint(bloom.NumSplitBlocksOf(int64(n), bitsPer)) * bloom.BlockSize * 8
}

// test reports whether key may have been added: false only if it was not.
func (b *layeredBloom) test(key uint64) bool {
	for _, l := range b.layers {
		if l.Check(key) {
			return true
		}
	}
	return false
}
