package catalog

import (
	"hash/maphash"

	"github.com/bits-and-blooms/bloom/v3"

	"github.com/flowcat-catalog/flowcat/schema"
)

// uploadIdentities records, while an upload with stable event ids is
// read, the identity of each of its events (appendIdentity) in a Bloom
// filter (bits-and-blooms/bloom) that grows in layers, and keeps apart the
// identities it meets a second time. The held filter then keeps, of the
// upload's events, only those whose identity is among these repeats in
// its window (no other can be found there again), and takes into its
// window of held events only those whose identity the upload may have.
// The filter answers "maybe" for some identities it never met (at most
// identityFP of them once a layer is full): such an event is kept when
// it need not be, which costs memory, never a result. It never answers
// "no" for one it met, so nothing the window must find is left out.
//
// Memory: about 14 bits an identity (the layers double, so at most
// twice that), and 8 bytes a repeat.
type uploadIdentities struct {
	id      Identity
	seed    maphash.Seed
	layers  []*bloom.BloomFilter
	n, cap  uint // identities added to the newest layer, and its capacity
	repeats map[uint64]struct{}
	buf     []byte
}

const (
	// identityFP is each layer's false positive rate when full.
	identityFP = 0.001
	// firstIdentities is the first layer's capacity; each next one
	// doubles it.
	firstIdentities = 1 << 16
)

// newUploadIdentities records identities under id.
func newUploadIdentities(id Identity) *uploadIdentities {
	return &uploadIdentities{id: id, seed: maphash.MakeSeed(), repeats: map[uint64]struct{}{}}
}

// add records the identity of e, one of the upload's events.
func (u *uploadIdentities) add(e *schema.Event) {
	h := identityHash(u.seed, &u.buf, u.id, e)
	if u.mayHold(u.buf) {
		u.repeats[h] = struct{}{}
		return
	}
	if len(u.layers) == 0 || u.n >= u.cap {
		u.cap = max(2*u.cap, firstIdentities)
		u.layers = append(u.layers, bloom.NewWithEstimates(u.cap, identityFP))
		u.n = 0
	}
	u.layers[len(u.layers)-1].Add(u.buf)
	u.n++
}

// mayHold reports whether key (appendIdentity's bytes) may be the
// identity of one of the upload's events: false only if it is not.
func (u *uploadIdentities) mayHold(key []byte) bool {
	for _, l := range u.layers {
		if l.Test(key) {
			return true
		}
	}
	return false
}

// repeated reports whether the identity whose hash (identityHash with
// u.seed) is h may belong to two or more of the upload's events: false
// only if it does not.
func (u *uploadIdentities) repeated(h uint64) bool {
	_, ok := u.repeats[h]
	return ok
}
