package summary

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// farEvents is 100 events of 50 two-event cases over four days of March
// 2024 and, when far, one arrival on 9999-12-31.
func farEvents(far bool, tag string) []schema.Event {
	var evs []schema.Event
	t0 := time.Date(2024, 3, 1, 0, 0, 0, 0, time.UTC)
	for i := range 50 {
		id := fmt.Sprintf("%s-%d", tag, i)
		at := t0.Add(time.Duration(i*2) * time.Hour)
		evs = append(evs,
			schema.Event{Site: "s", CaseID: id, Type: schema.Arrival, OccurredAt: at},
			schema.Event{Site: "s", CaseID: id, Type: schema.Departure, OccurredAt: at.Add(90 * time.Minute)})
	}
	if far {
		evs = append(evs, schema.Event{Site: "s", CaseID: tag + "-far", Type: schema.Arrival, OccurredAt: time.Date(9999, 12, 31, 12, 0, 0, 0, time.UTC)})
	}
	return evs
}

// TestFarEventBounded: one event dated 9999-12-31 adds one hour of
// exposure and one occupancy run, not the 2.9 million days up to it; the state and
// the summary stay the size of the clean file's, merged over files too.
func TestFarEventBounded(t *testing.T) {
	state := func(evs []schema.Event) (*Accumulator, []byte) {
		a := New(Options{})
		a.ObserveAll(evs)
		b, err := a.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		return a, b
	}
	clean, cb := state(farEvents(false, "a"))
	far, fb := state(farEvents(true, "b"))
	cs, fs := clean.Summary(), far.Summary()
	if fs.ExposureHours != cs.ExposureHours+1 {
		t.Errorf("exposure %d hours with the far event, %d without; want one more (its own hour)", fs.ExposureHours, cs.ExposureHours)
	}
	if len(fs.Occupancy.Runs) != 2 || len(cs.Occupancy.Runs) != 1 {
		t.Errorf("occupancy runs %d and %d, want 2 and 1", len(fs.Occupancy.Runs), len(cs.Occupancy.Runs))
	}
	if len(fb) > len(cb)+64 {
		t.Errorf("state %d bytes with the far event, %d without", len(fb), len(cb))
	}
	js, _ := json.Marshal(fs)
	jc, _ := json.Marshal(cs)
	if len(js) > 2*len(jc) {
		t.Errorf("summary JSON %d bytes with the far event, %d without", len(js), len(jc))
	}
	// Little's law still holds as an identity over the silence.
	if r := fs.Occupancy.Little.Ratio; math.Abs(r-1) > 1e-9 {
		t.Errorf("Little ratio %v", r)
	}
	// Merged with more files, and through the stored state.
	m := New(Options{})
	for i := range 5 {
		var x Accumulator
		if err := x.UnmarshalBinary(fb); err != nil {
			t.Fatal(err)
		}
		if err := m.Merge(&x); err != nil {
			t.Fatal(err)
		}
		_, b := state(farEvents(i%2 == 0, fmt.Sprint("m", i)))
		var y Accumulator
		if err := y.UnmarshalBinary(b); err != nil {
			t.Fatal(err)
		}
		if err := m.Merge(&y); err != nil {
			t.Fatal(err)
		}
	}
	mb, _ := m.MarshalBinary()
	if ms := m.Summary(); ms.ExposureHours != fs.ExposureHours || len(mb) > 4*len(fb) {
		t.Errorf("merged: exposure %d hours (want %d), state %d bytes", ms.ExposureHours, fs.ExposureHours, len(mb))
	}
}

// TestObservedAdd checks the day ranges against a plain set of days,
// joined across gaps of at most observedJoinDays, whatever the order in
// which the ranges come.
func TestObservedAdd(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	const lo, hi = -400, 400
	for range 300 {
		var o observed
		var mark [hi - lo + 10]bool
		for range 20 {
			f := int32(r.IntN(600) - 300)
			l := f + int32(r.IntN(5))
			o.add(dayRange{first: f, last: l})
			for d := f; d <= l; d++ {
				mark[d-lo] = true
			}
		}
		// Join gaps of at most observedJoinDays.
		last := -1
		for i := range mark {
			if !mark[i] {
				continue
			}
			if last >= 0 && int32(i-last) <= observedJoinDays {
				for k := last + 1; k < i; k++ {
					mark[k] = true
				}
			}
			last = i
		}
		n := 0
		var w [7]int
		for i, m := range mark {
			if m {
				n++
				d := int32(i + lo)
				w[((d+3)%7+7)%7]++
			}
		}
		if o.days() != n || o.weekdays() != w {
			t.Fatalf("%d days %v, want %d %v: %v", o.days(), o.weekdays(), n, w, o)
		}
		for i := range o {
			if o[i].first > o[i].last || i > 0 && o[i].first <= o[i-1].last+observedJoinDays {
				t.Fatalf("ranges not sorted and apart: %v", o)
			}
		}
	}
}
