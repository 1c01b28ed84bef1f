package cases

import (
	"maps"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Split is the per-case computation for two sets of observers at once:
// every event of a case goes to the first set (all), only the events the
// caller keeps to the second (kept). A case none of whose events is
// dropped is computed once, both sets observing that one computation. At
// a case's first dropped event the computation forks: a copy of its state
// so far (which is what the kept events before it gave) carries on for the
// kept set with the kept events only, while the original takes every event
// for the all set. The kept set sees exactly what a Builder fed only the
// kept events would report, the all set what a Builder fed all of them
// would; TestSplitIsTwoBuilders compares them. Like a Builder it holds one
// case at a time, and it is not safe for concurrent use.
type Split struct {
	all       Builder
	fork      *Builder // the kept set's computation of the case in hand once it dropped an event; nil before
	spare     *Builder // a fork's buffers, kept for the next one
	allObs    []Observer
	keptObs   []Observer
	both      []Observer
	keptCases int64
}

// NewSplit returns a split computation whose cases end also at the event
// types of terminal (see [Builder.Terminal]).
func NewSplit(terminal []schema.EventType, all, kept []Observer) *Split {
	s := &Split{allObs: all, keptObs: kept, both: append(append([]Observer(nil), all...), kept...)}
	s.all = Builder{Terminal: terminal, obs: s.both, acts: map[string]struct{}{}}
	return s
}

// Add takes the next event, in the order a Builder takes them; keep says
// whether the kept set sees it.
func (s *Split) Add(e *schema.Event, keep bool) {
	if s.all.has && e.CaseID != s.all.cur.CaseID {
		s.Flush()
	}
	if !keep && s.fork == nil {
		if s.spare == nil {
			s.spare = &Builder{acts: map[string]struct{}{}}
		}
		s.fork, s.spare = s.spare, nil
		s.all.forkInto(s.fork, s.keptObs)
		s.all.obs = s.allObs
	}
	s.all.Add(e)
	if keep && s.fork != nil {
		s.fork.Add(e)
	}
}

// Flush finishes the case in hand, if any, for both sets.
func (s *Split) Flush() {
	if s.fork == nil {
		if s.all.has {
			s.keptCases++
		}
		s.all.Flush()
		return
	}
	s.all.Flush()
	s.fork.Flush()
	s.keptCases += s.fork.cases
	s.fork.cases = 0
	s.fork, s.spare = nil, s.fork
	s.all.obs = s.both
}

// Cases is how many cases the all set has been given.
func (s *Split) Cases() int64 { return s.all.cases }

// KeptCases is how many cases the kept set has been given: those with at
// least one kept event.
func (s *Split) KeptCases() int64 { return s.keptCases }

// forkInto makes f a copy of b's state, reporting to obs from now on. The
// record's pointers are shared: a builder replaces them, never writes
// through them. The slices and the map are copied into f's own buffers.
// TestBuilderForkIsDeep fails when a field that holds a reference is
// added to Builder and not handled here.
func (b *Builder) forkInto(f *Builder, obs []Observer) {
	sites, acts, stepOpen, open := f.sites, f.acts, f.steps.open, f.open
	*f = *b
	f.obs, f.cases = obs, 0
	f.sites = append(sites[:0], b.sites...)
	clear(acts)
	maps.Copy(acts, b.acts)
	f.acts = acts
	f.steps.open = append(stepOpen[:0], b.steps.open...)
	f.open = append(open[:0], b.open...)
}
