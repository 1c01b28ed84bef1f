package catalog

import (
	"fmt"
	"hash/maphash"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go/bloom"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestUploadIdentities: over more identities than one Bloom layer holds,
// and more repeats than one layer of theirs, every identity recorded is
// answered "maybe" (no false negatives), every identity recorded twice is
// a repeat, and identities recorded once or never are answered "maybe" or
// taken for repeats rarely (the layers' false positives, under 1% and
// 0.1% each when full).
func TestUploadIdentities(t *testing.T) {
	const n, twice = 200_000, 4000
	defer func(c, r uint) { firstIdentities, firstRepeats = c, r }(firstIdentities, firstRepeats)
	firstIdentities, firstRepeats = 1<<15, 1<<10 // several layers of each
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
	if len(u.all.layers) < 2 || len(u.repeats.layers) < 2 {
		t.Fatalf("%d and %d layers for %d identities, %d repeats", len(u.all.layers), len(u.repeats.layers), n, twice)
	}
	var buf []byte
	once := 0 // recorded once, taken for a repeat
	for i := range n {
		key := identityHash(u.seed, &buf, IdentityEventID, ev("north", i))
		if !u.mayHold(key) {
			t.Fatalf("identity %d recorded, answered no", i)
		}
		switch {
		case i%(n/twice) == 0 && !u.repeated(key):
			t.Fatalf("identity %d recorded twice, not a repeat", i)
		case i%(n/twice) != 0 && u.repeated(key):
			once++
		}
	}
	// At most identityFP a layer of the first filter (an identity taken
	// for met before) and repeatFP a layer of the repeats'.
	bound := len(u.all.layers)*n/100 + len(u.repeats.layers)*n/1000
	if once > bound {
		t.Errorf("%d identities recorded once taken for repeats (bound %d)", once, bound)
	}
	maybe, rep := 0, 0
	for i := range n {
		key := identityHash(u.seed, &buf, IdentityEventID, ev("south", i)) // another site: never recorded
		if u.mayHold(key) {
			maybe++
		}
		if u.repeated(key) {
			rep++
		}
	}
	if maybe > len(u.all.layers)*n/100 || rep > len(u.repeats.layers)*n/1000 {
		t.Errorf("of %d identities never recorded, %d answered maybe, %d taken for repeats", n, maybe, rep)
	}
	t.Logf("%d and %d layers, %d recorded once taken for repeats, %d of %d unseen answered maybe, %d taken for repeats", len(u.all.layers), len(u.repeats.layers), once, maybe, n, rep)
	// Without its filter it answers "maybe" to anything, and keeps its repeats.
	u.dropFilter()
	key := identityHash(u.seed, &buf, IdentityEventID, ev("south", 1))
	unseen := !u.mayHold(key) || u.repeated(key)
	key = identityHash(u.seed, &buf, IdentityEventID, ev("north", 0))
	if unseen || !u.repeated(key) {
		t.Error("after dropFilter: an identity never recorded is not a maybe, or the repeats changed")
	}
}

// TestLayeredBloomBound: a filter given more keys than its bound of bits
// holds at its false positive rate stops adding layers at the bound, and
// still answers "maybe" for every key it was given.
func TestLayeredBloomBound(t *testing.T) {
	b := layeredBloom{first: 1 << 10, bitsPer: identityBits, maxBits: 1 << 16}
	seed := maphash.MakeSeed()
	key := func(i int) uint64 { return maphash.Comparable(seed, i) }
	for i := range 100_000 {
		b.testOrAdd(key(i))
	}
	var bits uint
	for _, l := range b.layers {
		bits += uint(len(l)) * bloom.BlockSize * 8
	}
	if bits > b.maxBits || bits != b.bits || len(b.layers) < 2 {
		t.Fatalf("%d layers of %d bits in all (counted %d), bound %d", len(b.layers), bits, b.bits, b.maxBits)
	}
	for i := range 100_000 {
		if !b.test(key(i)) {
			t.Fatalf("key %d added, answered no", i)
		}
	}
}

// TestIdentityHashRec: the identity hashed from an event's window record
// at hand is the one identityHash gives, under either identity, with and
// without an event id (the held filter and the upload's filters must
// agree, or a repeat would be missed).
func TestIdentityHashRec(t *testing.T) {
	seed := maphash.MakeSeed()
	at := time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	evs := []schema.Event{
		{Site: "north", CaseID: "c1", Type: schema.Arrival, OccurredAt: at, EventID: "e1"},
		{Site: "north", CaseID: "c1", Type: schema.Arrival, OccurredAt: at},
		{Site: "south", CaseID: "c2", Type: schema.Start, Queue: "q", OccurredAt: at.Add(time.Second), Outcome: "x"},
	}
	var a, b, rec []byte
	for _, id := range []Identity{IdentityContent, IdentityEventID} {
		for i := range evs {
			rec = appendWindowRecord(rec[:0], &evs[i])
			if got, want := identityHashRec(seed, &b, id, &evs[i], rec), identityHash(seed, &a, id, &evs[i]); got != want || string(a) != string(b) {
				t.Errorf("%s, event %d: %x from the record, %x from the event", id, i, got, want)
			}
		}
	}
}
