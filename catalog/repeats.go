package catalog

import (
	"hash/maphash"

	"github.com/bits-and-blooms/bloom/v3"

	"github.com/flowcat-catalog/flowcat/schema"
)

// uploadIdentities records, while an upload is read, the identity of each
// of its events (appendIdentity) in a Bloom filter (bits-and-blooms/bloom)
// that grows in layers, and keeps apart the identities it meets a second
// time. The held filter then keeps, of the upload's events, only those
// whose identity is among these repeats in its window (no other can be
// found there again), and, with stable event ids, takes into its window
// of held events only those whose identity the upload may have (with
// content identity that window is one instant, and the filter is dropped
// once the file is read: dropFilter).
// The filter answers "maybe" for some identities it never met (at most
// identityFP of them a layer once full): such an event is kept when
// it need not be, which costs memory, never a result. It never answers
// "no" for one it met, so nothing the window must find is left out.
//
// Memory: about 10 bits an identity (the layers double, so at most
// twice that; 1.2 MB at least), and some 16 bytes a repeat (a false
// positive is a repeat too: about 1% of the identities).
type uploadIdentities struct {
	id      Identity
	dropped bool // the filter is gone: mayHold answers "maybe"
	seed    maphash.Seed
	layers  []*bloom.BloomFilter
	n, cap  uint // identities added to the newest layer, and its capacity
	repeats map[uint64]struct{}
	buf     []byte
}

// identityFP is each layer's false positive rate when full.
const identityFP = 0.01

// firstIdentities is the first layer's capacity (1.2 MB); each next one
// doubles it. A variable for tests.
var firstIdentities uint = 1 << 20

// newUploadIdentities records identities under id.
func newUploadIdentities(id Identity) *uploadIdentities {
	return &uploadIdentities{id: id, seed: maphash.MakeSeed(), repeats: map[uint64]struct{}{}}
}

// add records the identity of e, one of the upload's events. Each layer
// hashes the key itself (the library's own hashing), so the first layer
// is large enough for most uploads to need one.
func (u *uploadIdentities) add(e *schema.Event) {
	h := identityHash(u.seed, &u.buf, u.id, e)
	for i, l := range u.layers {
		if i == len(u.layers)-1 && u.n < u.cap { // the newest, with room
			if l.TestOrAdd(u.buf) {
				u.repeats[h] = struct{}{}
			} else {
				u.n++
			}
			return
		}
		if l.Test(u.buf) {
			u.repeats[h] = struct{}{}
			return
		}
	}
	u.cap = max(2*u.cap, firstIdentities)
	u.layers = append(u.layers, bloom.NewWithEstimates(u.cap, identityFP).Add(u.buf))
	u.n = 1
}

// mayHold reports whether key (appendIdentity's bytes) may be the
// identity of one of the upload's events: false only if it is not.
func (u *uploadIdentities) mayHold(key []byte) bool {
	if u.dropped {
		return true
	}
	for _, l := range u.layers {
		if l.Test(key) {
			return true
		}
	}
	return false
}

// dropFilter frees the filter once the file is read, keeping the
// repeats; mayHold then answers "maybe" to every identity.
func (u *uploadIdentities) dropFilter() { u.layers, u.dropped = nil, true }

// repeated reports whether the identity whose hash (identityHash with
// u.seed) is h may belong to two or more of the upload's events: false
// only if it does not.
func (u *uploadIdentities) repeated(h uint64) bool {
	_, ok := u.repeats[h]
	return ok
}
