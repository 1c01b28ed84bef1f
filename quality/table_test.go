package quality

import (
	"math/rand/v2"
	"testing"
)

// TestCaseTable checks the open-addressing table against a Go map under
// random inserts, updates and sweeps, with keys crowded onto few home
// slots so that clusters are long and wrap around the end.
func TestCaseTable(t *testing.T) {
	rnd := rand.New(rand.NewPCG(7, 9))
	for _, spread := range []uint64{16, 1 << 12, 1 << 40} {
		tab := newTable(^uint64(0), 0) // nothing expires in lookup
		ref := map[uint64]uint64{}
		for round := range 40 {
			for range 700 {
				// Keys near the end of the table wrap; the high bits keep them distinct.
				k := (rnd.Uint64N(spread) + minShardSize - 8) | rnd.Uint64N(1<<20)<<44 | 1
				v := rnd.Uint64N(1000)
				s, ok := tab.lookup(k, 0)
				if _, want := ref[k]; ok != want {
					t.Fatalf("spread %d round %d: key %x found=%v, want %v", spread, round, k, ok, want)
				}
				if !ok {
					tab.claim(s, k)
				}
				s.rec = v
				ref[k] = v
			}
			cut := rnd.Uint64N(1000)
			tab.sweep(func(s *slot) bool { return s.rec < cut })
			for k, v := range ref {
				if v < cut {
					delete(ref, k)
				}
			}
			if tab.n != len(ref) {
				t.Fatalf("spread %d round %d: %d records, want %d", spread, round, tab.n, len(ref))
			}
			seen := 0
			for i := range tab.shards {
				for _, s := range tab.shards[i].slots {
					if s.key != 0 {
						seen++
					}
				}
			}
			if seen != len(ref) {
				t.Fatalf("spread %d round %d: %d used slots, want %d", spread, round, seen, len(ref))
			}
			for k, v := range ref {
				s, ok := tab.lookup(k, 0)
				if !ok || s.rec != v {
					t.Fatalf("spread %d round %d: key %x lost after sweep", spread, round, k)
				}
			}
		}
	}
}

// TestTableWindow: keys seen at rising instants, each found again only
// within the window, as a Go map that never forgets says; and the table,
// dropping expired records before it grows, keeps its slots within a few
// times the records of the window (without that, a table swept only every
// so many events holds twice the window and doubles for it).
func TestTableWindow(t *testing.T) {
	const window = 20000
	rnd := rand.New(rand.NewPCG(11, 12))
	tab := newTable(window, 0)
	ref := map[uint64]uint64{}
	var now uint64
	maxSlots, maxLive := 0, 0
	for i := range 400_000 {
		now += rnd.Uint64N(3) // about 20,000 keys in a window
		k := nonZero(rnd.Uint64())
		if rnd.IntN(4) == 0 && len(ref) > 0 {
			for r := range ref { // a key seen before: found if in the window
				k = r
				break
			}
		}
		s, ok := tab.lookup(k, now)
		rec, seen := ref[k]
		want := seen && now-rec <= window
		if got := ok && now-s.rec <= window; got != want {
			t.Fatalf("event %d: key %x in the window = %v, want %v", i, k, got, want)
		}
		if !ok {
			tab.claim(s, k)
		}
		s.rec = now
		ref[k] = now
		if i%1000 == 999 {
			live := 0
			for _, r := range ref {
				if now-r <= window {
					live++
				}
			}
			maxLive = max(maxLive, live)
			maxSlots = max(maxSlots, tab.slotCount())
			for r, at := range ref { // forget what can no longer be found
				if now-at > 4*window {
					delete(ref, r)
				}
			}
		}
	}
	// A shard grows only when more than 11/16 of it is in the window
	// after a sweep, so at most 2 x 16/11 (about 2.9) slots a record,
	// plus the shards' least size.
	if bound := 32*maxLive/11 + tableShards*minShardSize; maxSlots > bound {
		t.Errorf("%d slots for at most %d records in the window, want at most %d", maxSlots, maxLive, bound)
	}
	t.Logf("at most %d records in the window, at most %d slots", maxLive, maxSlots)
}

// TestTableBound: a table whose shards may not grow past a bound, fed a
// window denser than it can hold, keeps its slots within the bound,
// never finds a key it should not, and always finds a key seen again
// less than the look-back it reports after its last sighting (a key seen
// again later, within the window, may be forgotten). Checked against a
// Go map that never forgets.
func TestTableBound(t *testing.T) {
	const window = 1 << 40 // nothing expires: the bound alone forgets
	const maxShard = 64
	rnd := rand.New(rand.NewPCG(21, 22))
	tab := newTable(window, maxShard)
	ref := map[uint64]uint64{}
	var keys []uint64
	var now uint64
	missed, closeFound := 0, 0
	for i := range 300_000 {
		now += rnd.Uint64N(3)
		k := nonZero(rnd.Uint64())
		if len(keys) > 0 && rnd.IntN(3) == 0 {
			// A key seen before, mostly recently, sometimes long ago.
			back := rnd.IntN(min(len(keys), 64))
			if rnd.IntN(4) == 0 {
				back = rnd.IntN(len(keys))
			}
			k = keys[len(keys)-1-back]
		}
		s, ok := tab.lookup(k, now)
		rec, seen := ref[k]
		if ok && (!seen || s.rec != rec) {
			t.Fatalf("event %d: key %x found with instant %d; seen=%v at %d", i, k, s.rec, seen, rec)
		}
		if seen && !ok {
			if !tab.bound.hit || now-rec < tab.bound.lookback {
				t.Fatalf("event %d: key %x seen %d before not found; reported look-back %d (bound hit %v)",
					i, k, now-rec, tab.bound.lookback, tab.bound.hit)
			}
			missed++
		}
		if seen && ok && tab.bound.hit && now-rec < tab.bound.lookback {
			closeFound++
		}
		if !ok {
			tab.claim(s, k)
			keys = append(keys, k)
		}
		s.rec = now
		ref[k] = now
		if n := tab.slotCount(); n > tableShards*maxShard {
			t.Fatalf("event %d: %d slots, bound %d", i, n, tableShards*maxShard)
		}
	}
	b := tab.bound
	if !b.hit || b.dropped == 0 || missed == 0 || closeFound == 0 {
		t.Fatalf("bound %+v, %d keys forgotten, %d found within the look-back: the test did not reach the bound", b, missed, closeFound)
	}
	// Half a shard's worth of the newest keys stays: about 2,048 keys at
	// 1 instant a key, so the look-back is a few hundred instants or more.
	if b.lookback < 500 {
		t.Errorf("look-back %d after the bound: the oldest records were not the ones dropped", b.lookback)
	}
	t.Logf("bound %+v; %d of the keys seen again forgotten", b, missed)
}
