package kway

import (
	"errors"
	"math/rand/v2"
	"slices"
	"testing"
)

type cursor struct{ s []int }

func byHead(a, b *cursor) bool { return a.s[0] < b.s[0] }

// drain merges h's cursors and returns the items in the order they came.
func drain(h *Heap[*cursor], each func(got []int)) []int {
	var got []int
	for h.Len() > 0 {
		got = append(got, h.Top().s[0])
		h.Advance(func(c *cursor) (bool, error) {
			c.s = c.s[1:]
			return len(c.s) > 0, nil
		})
		if each != nil {
			each(got)
		}
	}
	return got
}

// TestMergeSorted: merging random sorted streams gives all their items in
// order, checked against slices.Sort of them all; so does a stream
// pushed in mid-way whose items are not below those out already.
func TestMergeSorted(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	stream := func(lo int) []int {
		s := make([]int, 1+r.IntN(50))
		for i := range s {
			s[i] = lo + r.IntN(100)
		}
		slices.Sort(s)
		return s
	}
	for round := range 300 {
		var all []int
		var cs []*cursor
		for range r.IntN(9) {
			s := stream(0)
			all = append(all, s...)
			cs = append(cs, &cursor{s: s})
		}
		late := stream(1000) // above every other item
		all = append(all, late...)
		h := New(byHead, cs...)
		pushed := false
		got := drain(h, func(got []int) {
			if !pushed && len(got) == 1 {
				h.Push(&cursor{s: late})
				pushed = true
			}
		})
		if !pushed {
			h.Push(&cursor{s: late})
			got = append(got, drain(h, nil)...)
		}
		slices.Sort(all)
		if !slices.Equal(got, all) {
			t.Fatalf("round %d: merged %v\nwant %v", round, got, all)
		}
	}
}

// TestAdvanceError: a cursor that fails to advance ends the merge with its
// error, the heap left as it was.
func TestAdvanceError(t *testing.T) {
	boom := errors.New("a damaged run")
	h := New(byHead, &cursor{s: []int{1, 2}}, &cursor{s: []int{3}})
	if err := h.Advance(func(*cursor) (bool, error) { return false, boom }); err != boom {
		t.Fatalf("Advance: %v, want the cursor's error", err)
	}
	if h.Len() != 2 || h.Top().s[0] != 1 {
		t.Fatalf("heap changed by a failed advance: %d cursors, top %v", h.Len(), h.Top().s)
	}
}
