package cases

import (
	"fmt"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// logObs writes every call it gets, with its whole argument, to a log.
type logObs struct{ b strings.Builder }

func (l *logObs) Event(e *schema.Event) { fmt.Fprintf(&l.b, "E %+v\n", *e) }
func (l *logObs) Wait(w *Wait)          { fmt.Fprintf(&l.b, "W %+v\n", *w) }
func (l *logObs) Service(s *Service)    { fmt.Fprintf(&l.b, "S %+v\n", *s) }
func (l *logObs) Case(r *Record) {
	p := func(x *int64) string {
		if x == nil {
			return "nil"
		}
		return fmt.Sprint(*x)
	}
	c := *r // its pointers printed by value
	c.Arrival, c.Start, c.End, c.Wait, c.Service, c.Stay, c.OpenSince = nil, nil, nil, nil, nil, nil, nil
	fmt.Fprintf(&l.b, "C %+v arr=%s start=%s end=%s wait=%s svc=%s stay=%s open=%s\n", c,
		p(r.Arrival), p(r.Start), p(r.End), p(r.Wait), p(r.Service), p(r.Stay), p(r.OpenSince))
}

// randomCases returns events of n random cases in the order a Builder
// takes them (case, then time), each with a keep flag drawn with
// probability pKeep: lifecycles with queues, activities, instance ids,
// several sites, repeated instants and cases made only of dropped events.
func randomCases(rng *rand.Rand, n int, pKeep float64) ([]schema.Event, []bool) {
	types := schema.EventTypes
	acts := []string{"", "triage", "consult", "xray"}
	queues := []string{"", "walkin", "phone"}
	var evs []schema.Event
	var keep []bool
	for c := range n {
		at := time.Date(2026, 5, 1, 0, 0, 0, 0, time.UTC).Add(time.Duration(rng.IntN(1000)) * time.Minute)
		for range 1 + rng.IntN(12) {
			if rng.IntN(3) > 0 {
				at = at.Add(time.Duration(rng.IntN(90)) * time.Minute)
			}
			e := schema.Event{
				Site:       []string{"north", "south"}[rng.IntN(2)],
				CaseID:     fmt.Sprintf("case-%04d", c),
				SubjectID:  []string{"", "p1", "p2"}[rng.IntN(3)],
				Type:       types[rng.IntN(len(types))],
				Activity:   acts[rng.IntN(len(acts))],
				Queue:      queues[rng.IntN(len(queues))],
				InstanceID: []string{"", "", "i1", "i2"}[rng.IntN(4)],
				OccurredAt: at,
			}
			evs = append(evs, e)
			keep = append(keep, rng.Float64() < pKeep)
		}
	}
	return evs, keep
}

// TestSplitIsTwoBuilders: a Split reports to its all set exactly what a
// Builder given every event reports, and to its kept set exactly what a
// Builder given only the kept events reports, call for call, over random
// cases with no, some, most and every event dropped.
func TestSplitIsTwoBuilders(t *testing.T) {
	terminal := []schema.EventType{schema.Complete}
	for _, pKeep := range []float64{1, 0.97, 0.7, 0.3, 0} {
		for seed := range uint64(20) {
			rng := rand.New(rand.NewPCG(seed, 7))
			evs, keep := randomCases(rng, 60, pKeep)
			var wantAll, wantKept, gotAll, gotKept logObs
			ba := NewBuilder(&wantAll)
			ba.Terminal = terminal
			bk := NewBuilder(&wantKept)
			bk.Terminal = terminal
			s := NewSplit(terminal, []Observer{&gotAll}, []Observer{&gotKept})
			for i := range evs {
				ba.Add(&evs[i])
				if keep[i] {
					bk.Add(&evs[i])
				}
				s.Add(&evs[i], keep[i])
			}
			ba.Flush()
			bk.Flush()
			s.Flush()
			if gotAll.b.String() != wantAll.b.String() {
				t.Fatalf("keep %.2f seed %d: the all set's calls differ from one builder's over every event:\n%s", pKeep, seed, firstDiff(gotAll.b.String(), wantAll.b.String()))
			}
			if gotKept.b.String() != wantKept.b.String() {
				t.Fatalf("keep %.2f seed %d: the kept set's calls differ from one builder's over the kept events:\n%s", pKeep, seed, firstDiff(gotKept.b.String(), wantKept.b.String()))
			}
			if s.Cases() != ba.Cases() || s.KeptCases() != bk.Cases() {
				t.Fatalf("keep %.2f seed %d: cases %d and kept %d, want %d and %d", pKeep, seed, s.Cases(), s.KeptCases(), ba.Cases(), bk.Cases())
			}
			if pKeep == 0 && s.KeptCases() != 0 || pKeep == 1 && s.KeptCases() != s.Cases() {
				t.Fatalf("keep %.2f: %d kept cases of %d", pKeep, s.KeptCases(), s.Cases())
			}
		}
	}
}

func firstDiff(got, want string) string {
	g, w := strings.Split(got, "\n"), strings.Split(want, "\n")
	for i := 0; i < len(g) || i < len(w); i++ {
		var a, b string
		if i < len(g) {
			a = g[i]
		}
		if i < len(w) {
			b = w[i]
		}
		if a != b {
			return fmt.Sprintf("call %d:\n got  %s\n want %s", i, a, b)
		}
	}
	return "(equal)"
}

// TestBuilderForkIsDeep: every field of Builder that holds a reference is
// either copied by forkInto or listed here as shared on purpose; a new one
// fails until it is handled there.
func TestBuilderForkIsDeep(t *testing.T) {
	copied := map[string]bool{"sites": true, "acts": true, "steps": true, "open": true}
	shared := map[string]bool{
		"Terminal": true, // read only
		"obs":      true, // replaced by the fork's own
		"cur":      true, // its pointers are replaced, never written through
		"firstAnc": true, // replaced, never written through
		"depart":   true, // replaced, never written through
	}
	var holds func(reflect.Type) bool
	holds = func(t reflect.Type) bool {
		switch t.Kind() {
		case reflect.Slice, reflect.Map, reflect.Pointer, reflect.Interface, reflect.Func, reflect.Chan:
			return true
		case reflect.Array:
			return holds(t.Elem())
		case reflect.Struct:
			for i := range t.NumField() {
				if holds(t.Field(i).Type) {
					return true
				}
			}
		}
		return false
	}
	bt := reflect.TypeFor[Builder]()
	for i := range bt.NumField() {
		f := bt.Field(i)
		if holds(f.Type) && !copied[f.Name] && !shared[f.Name] {
			t.Errorf("Builder.%s holds a reference: copy it in forkInto, or list it as shared here with the reason", f.Name)
		}
	}
	// Steps holds exactly the one slice forkInto copies.
	if st := reflect.TypeFor[Steps](); st.NumField() != 1 || st.Field(0).Name != "open" {
		t.Errorf("Steps has fields forkInto does not copy")
	}
}
