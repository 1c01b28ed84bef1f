package quality

import "slices"

// table is a set of 64-bit keys, each with the latest instant it was seen
// (rec, microseconds after the file's first); a record whose instant lies
// more than window before the instant in hand has expired. It is an
// open-addressing table with linear probing, which costs one cache line
// per lookup where a Go map, needing a read and a write, costs several;
// the event-id check runs on every event. Key 0 marks an empty slot.
//
// Memory: the table is split into tableShards shards by the key's top
// bits, each growing on its own, so that growing holds the old and the new
// slots of one shard, not of the whole table; and a shard about to grow
// first drops its expired records, so that it grows only for records in
// the window, however long ago the last sweep of the whole table was.
//
// Bound: a shard may not grow past maxShard slots (0: no bound). A shard
// at the bound that would grow drops its oldest records instead, down to
// half its slots, so the table holds at most tableShards·maxShard slots
// however dense the window; the look-back of such a shard then falls
// short of the window, and bound records by how much.
type table struct {
	shards   [tableShards]shard
	n        int
	window   uint64
	maxShard int
	bound    tableBound
	scratch  []uint64
}

// tableBound records what the bound cost: whether it dropped records
// still in the window, the instant of the first such drop, the shortest
// look-back a drop left (a key seen again less than that after its last
// sighting is always found; one seen again later, within the window,
// may not be), and how many records went.
type tableBound struct {
	hit      bool
	from     uint64
	lookback uint64
	dropped  int64
}

// shard is one open-addressing table.
type shard struct {
	slots []slot
	mask  uint64
	n     int
}

type slot struct {
	key, rec uint64
}

const (
	tableShardBits = 6
	tableShards    = 1 << tableShardBits
	minShardSize   = 16
)

// newTable returns an empty table whose records expire after window and
// whose shards hold at most maxShard slots each (a power of two, at
// least minShardSize; 0: no bound).
func newTable(window uint64, maxShard int) table {
	t := table{window: window, maxShard: maxShard}
	for i := range t.shards {
		t.shards[i] = shard{slots: make([]slot, minShardSize), mask: minShardSize - 1}
	}
	return t
}

// release forgets every record and frees the shards' slots, keeping what
// the bound cost (the report's event_id_bound); the table works on, empty.
func (t *table) release() {
	for i := range t.shards {
		t.shards[i] = shard{slots: make([]slot, minShardSize), mask: minShardSize - 1}
	}
	t.n, t.scratch = 0, nil
}

// shardBound returns the slots each shard may hold so that the table
// holds at most slots in all: a power of two, at least minShardSize.
func shardBound(slots int) int {
	per := minShardSize
	for per*2*tableShards <= slots {
		per *= 2
	}
	return per
}

func (t *table) shardOf(key uint64) *shard { return &t.shards[key>>(64-tableShardBits)] }

// lookup returns the slot of key (never 0) and whether it holds key; if
// not, the slot is the empty one where key belongs, which [table.claim]
// fills. Room for one more key is made first, so the slot stays valid
// until the next lookup: a full shard (3/4 of its slots in use) drops
// its records expired at now, then grows if more than 11/16 of it is
// still in use. So a shard sweeps at least every 1/16 of its size in new
// keys (at most 16 slots visited a key), and holds at most 16/11 slots a
// record in the window after its last growth (the window's ids in
// 1.45-2.9 slots each).
func (t *table) lookup(key, now uint64) (*slot, bool) {
	sh := t.shardOf(key)
	if 4*(sh.n+1) > 3*len(sh.slots) {
		t.n -= sh.sweep(func(s *slot) bool { return t.expired(s, now) })
		if 16*(sh.n+1) > 11*len(sh.slots) {
			if t.maxShard > 0 && len(sh.slots) >= t.maxShard {
				t.dropOldest(sh, now)
			} else {
				sh.resize(2 * len(sh.slots))
			}
		}
	}
	for i := key & sh.mask; ; i = (i + 1) & sh.mask {
		s := &sh.slots[i]
		if s.key == key {
			return s, true
		}
		if s.key == 0 {
			return s, false
		}
	}
}

// dropOldest makes room in sh, a shard at the bound whose records are all
// in the window: it drops the records last seen at or before the instant
// that leaves at most half its slots in use, and records the look-back
// left (every record it keeps was seen after that instant).
func (t *table) dropOldest(sh *shard, now uint64) {
	recs := t.scratch[:0]
	for _, s := range sh.slots {
		if s.key != 0 {
			recs = append(recs, s.rec)
		}
	}
	t.scratch = recs
	slices.Sort(recs)
	cut := recs[len(recs)-len(sh.slots)/2-1]
	n := sh.sweep(func(s *slot) bool { return s.rec <= cut })
	t.n -= n
	b := &t.bound
	lookback := now - cut
	if !b.hit {
		b.hit, b.from, b.lookback = true, now, lookback
	}
	b.lookback = min(b.lookback, lookback)
	b.dropped += int64(n)
}

// claim stores key in the empty slot s returned by lookup.
func (t *table) claim(s *slot, key uint64) {
	s.key = key
	t.shardOf(key).n++
	t.n++
}

// expired reports whether s's record lies more than the window before now.
func (t *table) expired(s *slot, now uint64) bool { return now-s.rec > t.window }

// expire drops the records expired at now.
func (t *table) expire(now uint64) {
	t.sweep(func(s *slot) bool { return t.expired(s, now) })
}

// sweep removes the records for which drop is true; drop may read the
// record before it goes.
func (t *table) sweep(drop func(s *slot) bool) {
	for i := range t.shards {
		t.n -= t.shards[i].sweep(drop)
	}
}

// slotCount is the number of slots of all shards.
func (t *table) slotCount() int {
	n := 0
	for i := range t.shards {
		n += len(t.shards[i].slots)
	}
	return n
}

func (sh *shard) resize(size int) {
	old := sh.slots
	sh.slots = make([]slot, size)
	touch(sh.slots)
	sh.mask = uint64(size - 1)
	for _, s := range old {
		if s.key != 0 {
			i := s.key & sh.mask
			for sh.slots[i].key != 0 {
				i = (i + 1) & sh.mask
			}
			sh.slots[i] = s
		}
	}
}

// sweep removes the shard's records for which drop is true and returns
// how many it removed.
func (sh *shard) sweep(drop func(s *slot) bool) int {
	// Start from an empty slot (the load stays under 3/4), so that no
	// cluster spans the start and removals only ever shift records into
	// the slot being examined or slots not yet examined.
	var start uint64
	for sh.slots[start].key != 0 {
		start++
	}
	before := sh.n
	for step := uint64(1); step <= sh.mask; {
		i := (start + step) & sh.mask
		if s := &sh.slots[i]; s.key != 0 && drop(s) {
			sh.remove(i) // slot i may now hold a shifted record: look again
			continue
		}
		step++
	}
	if len(sh.slots) > minShardSize && 8*sh.n < len(sh.slots) {
		sh.resize(max(minShardSize, len(sh.slots)/4))
	}
	return before - sh.n
}

// remove empties slot i and shifts later records of its cluster back so
// that every record stays reachable from its home slot.
func (sh *shard) remove(i uint64) {
	sh.n--
	for {
		sh.slots[i] = slot{}
		j := i
		for {
			j = (j + 1) & sh.mask
			if sh.slots[j].key == 0 {
				return
			}
			home := sh.slots[j].key & sh.mask
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
		sh.slots[i] = sh.slots[j]
		i = j
	}
}

// touch writes a zero into each 4 KiB page of slots. A large slice comes
// from memory fresh from the system, which a lookup would first read
// (mapping the kernel's shared zero page) and then write (a second fault,
// which copies that page and makes the other cores drop the old mapping
// from their TLBs, an interrupt each); written first, each page costs one
// fault. A perf profile of a 1M-event upload put 0.6% of the server's CPU
// in those copies under the table's lookups.
func touch(slots []slot) {
	const per = 4096 / 16 // slots a page
	for i := 0; i < len(slots); i += per {
		slots[i] = slot{}
	}
}

// nonZero maps a hash to a key: 0 marks an empty slot.
func nonZero(h uint64) uint64 {
	if h == 0 {
		return 1
	}
	return h
}
