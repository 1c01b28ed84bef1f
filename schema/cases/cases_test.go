package cases

import (
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

type collect struct {
	recs     []Record
	waits    []Wait
	services []Service
	events   int
}

func (c *collect) Event(*schema.Event) { c.events++ }
func (c *collect) Wait(w *Wait)        { c.waits = append(c.waits, *w) }
func (c *collect) Service(s *Service)  { c.services = append(c.services, *s) }
func (c *collect) Case(r *Record)      { c.recs = append(c.recs, *r) }

var t0 = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

type step struct {
	typ      schema.EventType
	min      int
	act, que string
}

func run(steps ...step) (*collect, Record) {
	c := &collect{}
	b := NewBuilder(c)
	for _, s := range steps {
		e := schema.Event{Site: "s", CaseID: "c1", Type: s.typ, Activity: s.act, Queue: s.que, OccurredAt: t0.Add(time.Duration(s.min) * time.Minute)}
		b.Add(&e)
	}
	b.Flush()
	return c, c.recs[0]
}

func secs(p *int64) float64 {
	if p == nil {
		return -1
	}
	return float64(*p) / 1e6
}

// TestOutcomes: how a case ended, the wait, the service and the stay, on
// small hand-made cases (the definitions in the package doc; the figures
// are worked out by hand).
func TestOutcomes(t *testing.T) {
	for _, tc := range []struct {
		name                string
		steps               []step
		out                 Outcome
		wait, service, stay float64 // seconds; -1 = not measured
		nWaits, nServices   int
	}{
		{"served and departed", []step{{schema.Arrival, 0, "", "q"}, {schema.Start, 10, "a", ""}, {schema.Complete, 25, "a", ""}, {schema.Departure, 30, "", ""}},
			Served, 600, 900, 1800, 1, 1},
		{"abandoned", []step{{schema.Arrival, 0, "", "q"}, {schema.Abandon, 7, "", ""}},
			Abandoned, 420, -1, 420, 1, 0}, // in the system until it abandoned
		{"abandoned then departed", []step{{schema.Arrival, 0, "", "q"}, {schema.Abandon, 7, "", ""}, {schema.Departure, 8, "", ""}},
			Abandoned, 420, -1, 480, 1, 0},
		{"still waiting", []step{{schema.Arrival, 0, "", "q"}},
			Open, -1, -1, -1, 1, 0},
		{"in service", []step{{schema.Arrival, 0, "", "q"}, {schema.Start, 3, "a", ""}},
			Open, 180, -1, -1, 1, 0},
		{"left unserved", []step{{schema.Arrival, 0, "", ""}, {schema.Departure, 3, "", ""}},
			LeftUnserved, -1, -1, 180, 1, 0},
		{"transferred", []step{{schema.Arrival, 0, "", "q"}, {schema.Start, 1, "a", ""}, {schema.Complete, 2, "a", ""}, {schema.Transfer, 3, "", "other"}},
			Transferred, 60, 60, -1, 2, 1},
		{"completions only", []step{{schema.Complete, 0, "x", ""}, {schema.Complete, 60, "y", ""}},
			Served, -1, -1, -1, 0, 0},
		{"overlapping activities", []step{{schema.Start, 0, "xray", ""}, {schema.Start, 5, "blood", ""}, {schema.Complete, 20, "xray", ""}, {schema.Complete, 30, "blood", ""}},
			Served, -1, 2700, -1, 0, 2},
	} {
		c, r := run(tc.steps...)
		if r.Outcome != tc.out || secs(r.Wait) != tc.wait || secs(r.Service) != tc.service || secs(r.Stay) != tc.stay ||
			len(c.waits) != tc.nWaits || len(c.services) != tc.nServices || c.events != len(tc.steps) {
			t.Errorf("%s: outcome %s wait %v service %v stay %v, %d waits %d services; want %s %v %v %v, %d %d",
				tc.name, r.Outcome, secs(r.Wait), secs(r.Service), secs(r.Stay), len(c.waits), len(c.services),
				tc.out, tc.wait, tc.service, tc.stay, tc.nWaits, tc.nServices)
		}
		if r.Events != int64(len(tc.steps)) || r.Duration() != int64(tc.steps[len(tc.steps)-1].min)*60e6 {
			t.Errorf("%s: %d events over %d µs", tc.name, r.Events, r.Duration())
		}
	}
}

// TestVariant: cases with the same ordered activities share a variant;
// another order, or a split of the same letters, does not.
func TestVariant(t *testing.T) {
	_, a := run(step{schema.Complete, 0, "ab", ""}, step{schema.Complete, 1, "c", ""})
	_, b := run(step{schema.Complete, 5, "ab", ""}, step{schema.Complete, 9, "c", ""})
	_, c := run(step{schema.Complete, 0, "a", ""}, step{schema.Complete, 1, "bc", ""})
	_, d := run(step{schema.Complete, 0, "c", ""}, step{schema.Complete, 1, "ab", ""})
	if a.Variant != b.Variant || a.Variant == c.Variant || a.Variant == d.Variant || a.Activities != 2 {
		t.Errorf("variants %x %x %x %x, activities %d", a.Variant, b.Variant, c.Variant, d.Variant, a.Activities)
	}
}

// TestCasesSplit: the builder finishes a case when the next one begins.
func TestCasesSplit(t *testing.T) {
	c := &collect{}
	b := NewBuilder(c)
	for i, id := range []string{"a", "a", "b", "c", "c", "c"} {
		e := schema.Event{Site: "s", CaseID: id, Type: schema.Complete, OccurredAt: t0.Add(time.Duration(i) * time.Hour)}
		b.Add(&e)
	}
	b.Flush()
	if len(c.recs) != 3 || c.recs[0].Events != 2 || c.recs[1].Events != 1 || c.recs[2].Events != 3 || b.Cases() != 3 {
		t.Errorf("records %+v", c.recs)
	}
}
