package catalog

import (
	"fmt"
	"testing"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestUploadIdentities: over more identities than one Bloom layer holds,
// every identity recorded is answered "maybe" (no false negatives), every
// identity recorded twice is a repeat, and identities never recorded are
// answered "maybe" or taken for repeats rarely (the layers' false
// positives, at most identityFP each when full).
func TestUploadIdentities(t *testing.T) {
	const n, twice = 200_000, 1000
	defer func(c uint) { firstIdentities = c }(firstIdentities)
	firstIdentities = 1 << 15 // several layers
	u := newUploadIdentities(IdentityEventID)
	ev := func(site string, i int) *schema.Event {
		return &schema.Event{Site: site, EventID: fmt.Sprintf("e%d", i)}
	}
	for i := range n {
		u.add(ev("north", i))
		if i%(n/twice) == 0 {
			u.add(ev("north", i))
		}
	}
	if len(u.layers) < 2 {
		t.Fatalf("%d layers for %d identities", len(u.layers), n)
	}
	var key []byte
	for i := range n {
		h := identityHash(u.seed, &key, IdentityEventID, ev("north", i))
		if !u.mayHold(key) {
			t.Fatalf("identity %d recorded, answered no", i)
		}
		if i%(n/twice) == 0 && !u.repeated(h) {
			t.Fatalf("identity %d recorded twice, not a repeat", i)
		}
	}
	bound := len(u.layers) * n / 100 // at most identityFP a layer
	if fp := len(u.repeats) - twice; fp < 0 || fp > bound {
		t.Errorf("%d repeats for %d identities recorded twice", len(u.repeats), twice)
	}
	maybe, rep := 0, 0
	for i := range n {
		h := identityHash(u.seed, &key, IdentityEventID, ev("south", i)) // another site: never recorded
		if u.mayHold(key) {
			maybe++
		}
		if u.repeated(h) {
			rep++
		}
	}
	if maybe > bound || rep > n/1000 {
		t.Errorf("of %d identities never recorded, %d answered maybe, %d taken for repeats", n, maybe, rep)
	}
	t.Logf("%d layers, %d repeats (%d true), %d of %d unseen answered maybe", len(u.layers), len(u.repeats), twice, maybe, n)
	// Without its filter it answers "maybe" to anything, and keeps its repeats.
	u.dropFilter()
	h := identityHash(u.seed, &key, IdentityEventID, ev("south", 1))
	if !u.mayHold(key) || u.repeated(h) || !u.repeated(identityHash(u.seed, &key, IdentityEventID, ev("north", 0))) {
		t.Error("after dropFilter: an identity never recorded is not a maybe, or the repeats changed")
	}
}
