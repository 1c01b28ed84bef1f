// Package kway is the one k-way merge of the catalog's sorted streams
// (sort runs, case groups' keys, held events, export cursors, spilled
// counts): a binary min-heap of cursors ordered by their current item.
// A merge takes the Top cursor's item, advances that cursor, and then
// calls Fix, or Pop once the cursor is spent. Equal items come out in no
// particular order; a caller that needs a stable order breaks ties in
// less.
package kway

import "container/heap"

// Heap is a min-heap of cursors under less.
type Heap[C any] struct {
	h items[C]
}

// New returns a heap of the cursors cs (taken, not copied) under less.
func New[C any](less func(a, b C) bool, cs ...C) *Heap[C] {
	k := &Heap[C]{h: items[C]{s: cs, less: less}}
	heap.Init(&k.h)
	return k
}

// Len is the number of cursors in the heap.
func (k *Heap[C]) Len() int { return len(k.h.s) }

// Top is the cursor with the least item; the heap must not be empty.
func (k *Heap[C]) Top() C { return k.h.s[0] }

// Fix restores the order after the Top cursor advanced.
func (k *Heap[C]) Fix() { heap.Fix(&k.h, 0) }

// Pop removes the Top cursor (spent) and returns it.
func (k *Heap[C]) Pop() C { return heap.Pop(&k.h).(C) }

// Advance moves the Top cursor on by next, which reports whether the
// cursor has an item still, and restores the order: Fix, or Pop once the
// cursor is spent.
func (k *Heap[C]) Advance(next func(C) (bool, error)) error {
	ok, err := next(k.Top())
	if err != nil {
		return err
	}
	if ok {
		k.Fix()
	} else {
		k.Pop()
	}
	return nil
}

// Push adds a cursor.
func (k *Heap[C]) Push(c C) { heap.Push(&k.h, c) }

// items adapts a slice of cursors to container/heap.
type items[C any] struct {
	s    []C
	less func(a, b C) bool
}

func (h *items[C]) Len() int           { return len(h.s) }
func (h *items[C]) Less(i, j int) bool { return h.less(h.s[i], h.s[j]) }
func (h *items[C]) Swap(i, j int)      { h.s[i], h.s[j] = h.s[j], h.s[i] }
func (h *items[C]) Push(x any)         { h.s = append(h.s, x.(C)) }
func (h *items[C]) Pop() any {
	var zero C
	c := h.s[len(h.s)-1]
	h.s[len(h.s)-1] = zero
	h.s = h.s[:len(h.s)-1]
	return c
}
