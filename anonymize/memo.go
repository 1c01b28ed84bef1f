package anonymize

import (
	"hash/maphash"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// memoSlots is the number of slots of each field's pseudonym memory, a
// power of two. An upload's events of one case, subject or resource
// mostly come close together, so a small direct-mapped table answers
// most of them without an HMAC; a collision only costs a recomputation.
const memoSlots = 8192

// memoSlot remembers one identifier of one field: its generation-1
// pseudonym (from which the time shift is derived), its pseudonym under
// the current generation, and its time shift for shiftFor maximum days.
type memoSlot struct {
	raw      string
	root     string
	final    string
	shiftFor int
	shift    time.Duration
}

// fieldMemo is one field's table.
type fieldMemo struct {
	field schema.Field
	slots []memoSlot
}

// remembered returns the slot of raw (not empty) in field f, computing
// its pseudonyms on a miss. The memory holds raw identifiers in process
// memory only, for the life of p (one upload), never on disk.
func (p *Pseudonymizer) remembered(f schema.Field, raw string) *memoSlot {
	var m *fieldMemo
	for i := range p.memos {
		if p.memos[i].field == f {
			m = &p.memos[i]
			break
		}
	}
	if m == nil {
		if len(p.memos) == 0 {
			p.seed = maphash.MakeSeed()
		}
		p.memos = append(p.memos, fieldMemo{field: f, slots: make([]memoSlot, memoSlots)})
		m = &p.memos[len(p.memos)-1]
	}
	s := &m.slots[maphash.String(p.seed, raw)&(memoSlots-1)]
	if s.root != "" && s.raw == raw {
		return s
	}
	p.root(f, raw)
	root := string(p.out[:])
	final := root
	if len(p.gens) > 1 {
		for _, g := range p.gens[1:] {
			p.step(g, f)
		}
		final = string(p.out[:])
	}
	*s = memoSlot{raw: strings.Clone(raw), root: root, final: final}
	return s
}

// shiftOf returns the time shift of slot s for maxDays (> 0).
func (p *Pseudonymizer) shiftOf(s *memoSlot, maxDays int) time.Duration {
	if s.shiftFor != maxDays {
		s.shift, s.shiftFor = p.TimeShift(s.root, maxDays), maxDays
	}
	return s.shift
}
