package quality

import (
	"hash/maphash"

	"github.com/flowcat-catalog/flowcat/schema"
)

// linearMax is how many events of one instant are compared one by one
// before the set switches to hashing; most instants hold a handful.
const linearMax = 8

// bigIndex is the index size above which the hash index is dropped rather
// than cleared when time advances: clearing costs its capacity, and one
// crowded instant must not slow every later one.
const bigIndex = 1024

// instantSet holds the distinct events of the current instant. Exact
// duplicates share their instant, so in a time-sorted stream this is all
// the memory duplicate detection needs. Hash matches are confirmed by
// comparing every field, so a hash collision never makes a false
// duplicate.
type instantSet struct {
	evs    []schema.Event
	hashes []uint64
	next   []int32 // next index with the same hash, or -1
	index  map[uint64]int32
	hashed bool
	h      maphash.Hash
}

func (s *instantSet) reset() {
	if cap(s.evs) > bigIndex {
		// One crowded instant must not pin its strings for the rest of the file.
		s.evs = nil
	}
	s.evs = s.evs[:0]
	if s.hashed {
		s.hashes, s.next = s.hashes[:0], s.next[:0]
		if len(s.index) > bigIndex {
			s.index = nil
		} else {
			clear(s.index)
		}
		s.hashed = false
	}
}

// add records e and reports whether an equal event was already present.
func (s *instantSet) add(e *schema.Event, seed maphash.Seed) bool {
	if !s.hashed {
		for i := range s.evs {
			if sameEvent(&s.evs[i], e) {
				return true
			}
		}
		s.evs = append(s.evs, *e)
		if len(s.evs) > linearMax {
			s.buildIndex(seed)
		}
		return false
	}
	h := s.hash(e, seed)
	head, ok := s.index[h]
	if ok {
		for i := head; i >= 0; i = s.next[i] {
			if sameEvent(&s.evs[i], e) {
				return true
			}
		}
	} else {
		head = -1
	}
	s.index[h] = int32(len(s.evs))
	s.evs = append(s.evs, *e)
	s.hashes = append(s.hashes, h)
	s.next = append(s.next, head)
	return false
}

func (s *instantSet) buildIndex(seed maphash.Seed) {
	if s.index == nil {
		s.index = make(map[uint64]int32, 2*linearMax)
	}
	s.hashed = true
	for i := range s.evs {
		h := s.hash(&s.evs[i], seed)
		head, ok := s.index[h]
		if !ok {
			head = -1
		}
		s.index[h] = int32(i)
		s.hashes = append(s.hashes, h)
		s.next = append(s.next, head)
	}
}

// hash covers every field but the instant, which all events of the set
// share, and the source line, which is not part of the event.
func (s *instantSet) hash(e *schema.Event, seed maphash.Seed) uint64 {
	h := &s.h
	h.SetSeed(seed)
	for _, v := range e.Texts() {
		h.WriteString(v)
		h.WriteByte(0)
	}
	return h.Sum64()
}

// sameEvent reports whether a and b are equal in every schema field. The
// instant is compared at microsecond precision; the line is not a field.
func sameEvent(a, b *schema.Event) bool { return schema.SameFields(a, b) }
