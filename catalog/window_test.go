package catalog

import (
	"fmt"
	"hash/maphash"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestWindowRecord: a window record gives back every schema field of its
// event, names its site and event_id, and two records are equal exactly
// when schema.SameFields holds (each field changed alone, and the instant
// changed below the microsecond, which SameFields ignores).
func TestWindowRecord(t *testing.T) {
	base := schema.Event{Site: "north", CaseID: "c1", SubjectID: "s1", ResourceID: "r1", Type: schema.Start,
		Activity: "triage", Queue: "walk-in", OccurredAt: time.Date(2026, 3, 2, 8, 0, 0, 123456000, time.UTC),
		Priority: "2", Channel: "phone", Outcome: "done", EventID: "e-1", InstanceID: "i1", Line: 7, Attrs: `{"a":1}`}
	rec := appendWindowRecord(nil, &base)
	back, ok := decodeWindowRecord(rec)
	if !ok || !schema.SameFields(&back, &base) {
		t.Fatalf("decoded %+v, want the fields of %+v", back, base)
	}
	if windowText(rec, windowSite) != "north" || windowText(rec, windowEventID) != "e-1" {
		t.Errorf("site %q, event_id %q", windowText(rec, windowSite), windowText(rec, windowEventID))
	}
	variants := []schema.Event{}
	for _, f := range schema.FieldSpecs() {
		v := base
		if f.Name == schema.FieldOccurredAt {
			v.OccurredAt = v.OccurredAt.Add(time.Microsecond)
		} else {
			f.Set(&v, f.Get(&v)+"x")
		}
		variants = append(variants, v)
	}
	sub := base
	sub.OccurredAt = sub.OccurredAt.Add(999 * time.Nanosecond) // the same microsecond
	sub.Line, sub.Attrs = 9, ""
	variants = append(variants, sub)
	for _, v := range variants {
		if got, want := sameContent(appendWindowRecord(nil, &v), rec), schema.SameFields(&v, &base); got != want {
			t.Errorf("%+v: same content %v, want %v", v, got, want)
		}
	}
	if _, ok := decodeWindowRecord(rec[:len(rec)-1]); ok {
		t.Error("a cut record decoded")
	}
}

// TestEventWindow: events added at rising instants, evicted below a
// moving bound, are found by identity exactly as a list of the events in
// the window says (the oldest of them), through the window's compactions (more than 1,024
// events leave at once), with the line they were added with.
func TestEventWindow(t *testing.T) {
	for _, id := range []Identity{IdentityEventID, IdentityContent} {
		seed := maphash.MakeSeed()
		var key []byte
		w := newEventWindow()
		rnd := rand.New(rand.NewPCG(5, 6))
		type kept struct{ e schema.Event }
		var ref []kept
		at := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
		for i := range 20000 {
			at = at.Add(time.Duration(rnd.IntN(3)) * time.Second)
			e := schema.Event{Site: fmt.Sprintf("s%d", rnd.IntN(2)), CaseID: fmt.Sprintf("c%d", rnd.IntN(50)),
				EventID: fmt.Sprintf("e%d", rnd.IntN(400)), OccurredAt: at, Line: int64(i)}
			if rnd.IntN(10) == 0 {
				e.EventID = "" // content identity for this one
			}
			lo := at.Add(-time.Duration(rnd.IntN(600)+1) * time.Second).UnixMicro()
			if i%5000 == 4999 {
				lo = at.UnixMicro() // empty the window now and then
			}
			w.evict(lo)
			for len(ref) > 0 && ref[0].e.OccurredAt.UnixMicro() < lo {
				ref = ref[1:]
			}
			rec := appendWindowRecord(nil, &e)
			hit, ok := w.find(identityHash(seed, &key, id, &e), id, &e, rec)
			var want *kept
			for j := range ref { // the oldest one with e's identity
				r := &ref[j]
				same := schema.SameFields(&r.e, &e)
				if id == IdentityEventID && r.e.EventID != "" {
					same = r.e.EventID == e.EventID && r.e.Site == e.Site
				}
				if same {
					want = r
					break
				}
			}
			if ok != (want != nil) {
				t.Fatalf("%s event %d: found %v, want %v", id, i, ok, want != nil)
			}
			if ok && (hit.line != want.e.Line || !schema.SameFields(hit.event(), &want.e)) {
				t.Fatalf("%s event %d: found line %d, want line %d", id, i, hit.line, want.e.Line)
			}
			w.add(identityHash(seed, &key, id, &e), &e, rec)
			ref = append(ref, kept{e})
		}
	}
}

// TestHeldWindow: held entries added at rising instants, evicted below a
// moving bound, are found by their two identity hashes exactly as a list
// of the entries in the window says (the oldest of them, its row, file and
// content hashes), while many identities share the index's hash (chains
// of other identities) and the window frees its chunks as it passes them:
// it never holds more chunks than its entries need and one.
func TestHeldWindow(t *testing.T) {
	w := newHeldWindow()
	rnd := rand.New(rand.NewPCG(7, 8))
	var ref []heldEntry
	at := int64(0)
	most := 0
	for i := range 60000 {
		at += int64(rnd.IntN(3)) * 1e6
		id := uint64(rnd.IntN(3000))
		x := heldEntry{slot: slot{at: at, hash: id % 61}, check: id, sum: [2]uint64{rnd.Uint64(), uint64(i)},
			row: int64(i), file: int32(rnd.IntN(4))}
		lo := at - 12000e6 // mostly one entry at a time, so every place in a chunk is an end
		if rnd.IntN(10) == 0 {
			lo -= int64(rnd.IntN(300)) * 1e6
		}
		if i%15000 == 14999 {
			lo = at // empty the window now and then
		}
		w.evict(lo)
		for len(ref) > 0 && ref[0].at < lo {
			ref = ref[1:]
		}
		got, ok := w.find(x.hash, x.check)
		want := slices.IndexFunc(ref, func(r heldEntry) bool { return r.check == x.check })
		if ok != (want >= 0) {
			t.Fatalf("entry %d: found %v, want %v", i, ok, want >= 0)
		}
		if ok {
			got.prev = ref[want].prev
			if got != ref[want] {
				t.Fatalf("entry %d: found %+v, want %+v", i, got, ref[want])
			}
		}
		w.add(x)
		ref = append(ref, x)
		if n := len(ref)/queueChunk + 2; len(w.ti.q.chunks) > n {
			t.Fatalf("entry %d: %d chunks for %d entries", i, len(w.ti.q.chunks), len(ref))
		}
		most = max(most, len(ref))
	}
	if most < 2*queueChunk {
		t.Fatalf("the window held at most %d entries: no chunk was freed under load", most)
	}
}
