package cases

import (
	"strings"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Steps tells which events of a case are the steps of its trace (the
// activity sequence of trace variants and directly-follows pairs). An
// event naming an activity is a step unless it is a complete closing an
// open start of the same activity instance (its instance_id where it has
// one, else its activity): that instance was counted at its start. So on a completion-only log every complete is a step, and on
// a log with starts and completes each activity instance is one step, at
// its start (common practice for logs with lifecycle transitions: a trace
// is a sequence of activity instances, not of their start and end rows).
// Feed one case's events in the case order (Less) and Reset between
// cases.
type Steps struct {
	open []openCount
}

type openCount struct {
	act, inst string
	n         int
}

// maxStepInstances bounds the activity instances with open starts one case
// tracks; past it a complete of another activity counts as a step.
const maxStepInstances = 64

// Step reports whether e is a step of its case's trace, and records the
// starts it opens and closes.
func (s *Steps) Step(e *schema.Event) bool {
	if e.Activity == "" {
		return false
	}
	i := -1
	for j := range s.open {
		if s.open[j].act == e.Activity && s.open[j].inst == e.InstanceID {
			i = j
			break
		}
	}
	switch e.Type {
	case schema.Start:
		switch {
		case i >= 0:
			s.open[i].n++
		case len(s.open) < maxStepInstances:
			s.open = append(s.open, openCount{strings.Clone(e.Activity), strings.Clone(e.InstanceID), 1})
		}
	case schema.Complete:
		if i >= 0 && s.open[i].n > 0 {
			s.open[i].n--
			return false
		}
	}
	return true
}

// Reset forgets the case in hand.
func (s *Steps) Reset() { s.open = s.open[:0] }
