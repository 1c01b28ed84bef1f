package catalog

import (
	"encoding/binary"
	"hash/maphash"

	"github.com/bits-and-blooms/bloom/v3"

	"github.com/flowcat-catalog/flowcat/schema"
)

// uploadIdentities records, while an upload is read, the identity of each
// of its events (identityHash: the 64-bit hash of appendIdentity's bytes
// under its seed, which the held filter computes anyway) in a Bloom
// filter (bits-and-blooms/bloom) that grows in layers, and the identities
// it meets a second time in another. The held filter then keeps, of the upload's events, only those
// whose identity is among these repeats in its window (no other can be
// found there again), and, with stable event ids, takes into its window
// of held events only those whose identity the upload may have (with
// content identity that window is one instant, and the first filter is
// dropped once the file is read: dropFilter).
// Each filter answers "maybe" for some identities it never met (at most
// identityFP of them a layer once full, and those whose 64-bit hash is
// another's): such an event is kept when it need not be, which costs
// memory, never a result. Neither answers "no" for one it met, so nothing
// the window must find is left out.
//
// Memory: about 10 bits an identity and 15 a repeat (the layers double,
// so at most twice that; 1.3 MB at least), and at most 24 MiB in all.
type uploadIdentities struct {
	id      Identity
	dropped bool // the first filter is gone: mayHold answers "maybe"
	seed    maphash.Seed
	all     layeredBloom // every identity
	repeats layeredBloom // the identities met twice or more
	buf     []byte
}

// identityFP and repeatFP are the false positive rates of each layer of
// the two filters when full: the repeats are few in most uploads, and
// each false one costs a place in the held filter's window.
const (
	identityFP = 0.01
	repeatFP   = 0.001
)

// firstIdentities is the first layer's capacity (1.2 MB) of the filter of
// all identities, firstRepeats of the repeats' (118 kB); each next layer
// doubles the one before. Variables for tests.
var (
	firstIdentities uint = 1 << 20
	firstRepeats    uint = 1 << 16
)

// maxIdentityBits and maxRepeatBits bound each filter's layers (16 and 8
// MiB): a filter that would grow past its bound fills its newest layer
// beyond that layer's capacity instead, and its false positives rise
// (over about 7 million identities, or 4 million repeats). A false "maybe"
// only puts an event in the held filter's windows, which hold their own
// bound (Options.ChangeWindowBytes).
const (
	maxIdentityBits = 16 << 20 * 8
	maxRepeatBits   = 8 << 20 * 8
)

// newUploadIdentities records identities under id.
func newUploadIdentities(id Identity) *uploadIdentities {
	return &uploadIdentities{id: id, seed: maphash.MakeSeed(),
		all:     layeredBloom{first: firstIdentities, fp: identityFP, maxBits: maxIdentityBits},
		repeats: layeredBloom{first: firstRepeats, fp: repeatFP, maxBits: maxRepeatBits}}
}

// add records the identity of e, one of the upload's events.
func (u *uploadIdentities) add(e *schema.Event) {
	k := hashKey(identityHash(u.seed, &u.buf, u.id, e))
	if u.all.testOrAdd(k[:]) {
		u.repeats.testOrAdd(k[:])
	}
}

// mayHold reports whether the identity whose hash (identityHash under the
// filter's seed) is h may be that of one of the upload's events: false
// only if it is not.
func (u *uploadIdentities) mayHold(h uint64) bool {
	if u.dropped {
		return true
	}
	k := hashKey(h)
	return u.all.test(k[:])
}

// dropFilter frees the filter of all identities once the file is read,
// keeping the repeats; mayHold then answers "maybe" to every identity.
func (u *uploadIdentities) dropFilter() { u.all, u.dropped = layeredBloom{}, true }

// repeated reports whether the identity whose hash is h may be that of two
// or more of the upload's events: false only if it is not.
func (u *uploadIdentities) repeated(h uint64) bool {
	k := hashKey(h)
	return u.repeats.test(k[:])
}

// hashKey is what the filters are given for an identity: its hash's 8
// bytes, which the library hashes in one block rather than the whole
// identity again (most of a filter's cost is then its memory reads).
func hashKey(h uint64) [8]byte {
	var k [8]byte
	binary.LittleEndian.PutUint64(k[:], h)
	return k
}

// layeredBloom is a Bloom filter that grows: layers of doubling capacity
// (from first), each at the false positive rate fp when full; a key is
// tested in each. Each layer hashes the key itself (the library's own
// hashing).
type layeredBloom struct {
	first   uint
	fp      float64
	maxBits uint // the layers' bits at most: past it the newest layer overfills
	bits    uint
	layers  []*bloom.BloomFilter
	n, cap  uint // keys added to the newest layer, and its capacity
}

// testOrAdd reports whether key may have been added before, and adds it
// if not (to the newest layer, tested and filled in one call).
func (b *layeredBloom) testOrAdd(key []byte) bool {
	if len(b.layers) > 0 && b.n >= b.cap {
		next := max(2*b.cap, b.first)
		m, _ := bloom.EstimateParameters(next, b.fp)
		if b.bits+m > b.maxBits {
			b.cap = ^uint(0) // the newest takes the rest
		}
	}
	for i, l := range b.layers {
		if i == len(b.layers)-1 && b.n < b.cap { // the newest, with room
			if l.TestOrAdd(key) {
				return true
			}
			b.n++
			return false
		}
		if l.Test(key) {
			return true
		}
	}
	b.cap = max(2*b.cap, b.first)
	l := bloom.NewWithEstimates(b.cap, b.fp)
	b.bits += l.Cap()
	b.layers = append(b.layers, l.Add(key))
	b.n = 1
	return false
}

// test reports whether key may have been added: false only if it was not.
func (b *layeredBloom) test(key []byte) bool {
	for _, l := range b.layers {
		if l.Test(key) {
			return true
		}
	}
	return false
}
