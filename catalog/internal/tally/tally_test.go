package tally

import (
	"fmt"
	"os"
	"testing"
)

// Past maxFanIn runs the counter merges in passes; keys come out once
// each, in order, with their counts summed across runs, and Close leaves
// no file behind.
func TestCounterManyRuns(t *testing.T) {
	dir := t.TempDir()
	c := New(dir, 4<<10)
	const n = 20000
	for round := range 3 {
		for i := range n {
			if i%3 >= round { // key i is added i%3+1 times, spread over rounds
				if err := c.Add(fmt.Sprintf("k%06d", i), 1); err != nil {
					t.Fatal(err)
				}
			}
		}
	}
	if c.Runs() <= maxFanIn {
		t.Fatalf("%d runs; the test needs more than %d", c.Runs(), maxFanIn)
	}
	for pass := range 2 { // Each may run again
		i := 0
		err := c.Each(func(k string, cnt uint64) error {
			if want := fmt.Sprintf("k%06d", i); k != want || cnt != uint64(i%3+1) {
				return fmt.Errorf("pass %d: key %s count %d, want %s count %d", pass, k, cnt, want, i%3+1)
			}
			i++
			return nil
		})
		if err != nil || i != n {
			t.Fatalf("%v; %d keys, want %d", err, i, n)
		}
	}
	if err := c.Close(); err != nil {
		t.Fatal(err)
	}
	if ents, _ := os.ReadDir(dir); len(ents) != 0 {
		t.Errorf("%d files left after Close", len(ents))
	}
}
