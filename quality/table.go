package quality

// table is a set of 64-bit keys, each with the latest instant it was seen
// (rec, microseconds after the file's first), which sweeps test. It is an
// open-addressing table with linear probing, which costs one cache line
// per lookup where a Go map, needing a read and a write, costs several;
// the event-id check runs on every event. Key 0 marks an empty slot.
type table struct {
	slots []slot
	mask  uint64
	n     int
}

type slot struct {
	key, rec uint64
}

const minTableSize = 1024

func newTable() table {
	return table{slots: make([]slot, minTableSize), mask: minTableSize - 1}
}

// lookup returns the slot of key (never 0) and whether it holds key; if
// not, the slot is the empty one where key belongs, which [table.claim]
// fills. Room for one more key is made first, so the slot stays valid
// until the next lookup.
func (t *table) lookup(key uint64) (*slot, bool) {
	if 4*(t.n+1) > 3*len(t.slots) {
		t.resize(2 * len(t.slots))
	}
	for i := key & t.mask; ; i = (i + 1) & t.mask {
		s := &t.slots[i]
		if s.key == key {
			return s, true
		}
		if s.key == 0 {
			return s, false
		}
	}
}

// claim stores key in the empty slot s returned by lookup.
func (t *table) claim(s *slot, key uint64) {
	s.key = key
	t.n++
}

func (t *table) resize(size int) {
	old := t.slots
	t.slots = make([]slot, size)
	t.mask = uint64(size - 1)
	for _, s := range old {
		if s.key != 0 {
			i := s.key & t.mask
			for t.slots[i].key != 0 {
				i = (i + 1) & t.mask
			}
			t.slots[i] = s
		}
	}
}

// sweep removes the records for which drop is true; drop may read the
// record before it goes.
func (t *table) sweep(drop func(s *slot) bool) {
	// Start from an empty slot (the load stays under 3/4), so that no
	// cluster spans the start and removals only ever shift records into
	// the slot being examined or slots not yet examined.
	var start uint64
	for t.slots[start].key != 0 {
		start++
	}
	for step := uint64(1); step <= t.mask; {
		i := (start + step) & t.mask
		if s := &t.slots[i]; s.key != 0 && drop(s) {
			t.remove(i) // slot i may now hold a shifted record: look again
			continue
		}
		step++
	}
	if len(t.slots) > minTableSize && 8*t.n < len(t.slots) {
		t.resize(max(minTableSize, len(t.slots)/4))
	}
}

// remove empties slot i and shifts later records of its cluster back so
// that every record stays reachable from its home slot.
func (t *table) remove(i uint64) {
	t.n--
	for {
		t.slots[i] = slot{}
		j := i
		for {
			j = (j + 1) & t.mask
			if t.slots[j].key == 0 {
				return
			}
			home := t.slots[j].key & t.mask
			// The record at j stays if its home lies cyclically in (i, j].
			if i <= j {
				if i < home && home <= j {
					continue
				}
			} else if home > i || home <= j {
				continue
			}
			break
		}
		t.slots[i] = t.slots[j]
		i = j
	}
}

// nonZero maps a hash to a key: 0 marks an empty slot.
func nonZero(h uint64) uint64 {
	if h == 0 {
		return 1
	}
	return h
}
