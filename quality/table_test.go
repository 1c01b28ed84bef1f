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
		tab := newTable()
		ref := map[uint64]uint64{}
		for round := range 40 {
			for range 700 {
				// Keys near the end of the table wrap; the high bits keep them distinct.
				k := (rnd.Uint64N(spread) + minTableSize - 8) | rnd.Uint64N(1<<20)<<44 | 1
				v := rnd.Uint64N(1000)
				s, ok := tab.lookup(k)
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
			for _, s := range tab.slots {
				if s.key != 0 {
					seen++
				}
			}
			if seen != len(ref) {
				t.Fatalf("spread %d round %d: %d used slots, want %d", spread, round, seen, len(ref))
			}
			for k, v := range ref {
				s, ok := tab.lookup(k)
				if !ok || s.rec != v {
					t.Fatalf("spread %d round %d: key %x lost after sweep", spread, round, k)
				}
			}
		}
	}
}
