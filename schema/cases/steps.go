package cases

import (
	"strings"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Steps tells which events of a case are the steps of its trace (the
// activity sequence of trace variants and directly-follows pairs): one
// step per activity instance, at its first event. An instance is keyed by
// its activity and, where the log names one, its instance_id. An enqueue
// or a start that finds no open instance of its key opens one (a start
// after an enqueue of the same key continues it); a complete or an abandon
// closes the open instance of its key, and is a step only when none is
// open (a completion-only log: every complete is a step). Other event
// types naming an activity are steps. So a log with enqueue, start and
// complete rows shows each instance once, not as a repeated activity
// (common practice for logs with lifecycle transitions: a trace is a
// sequence of activity instances, not of their rows). Feed one case's
// events in the case order (Less) and Reset between cases.
type Steps struct {
	open []openInstance
}

// openInstance counts the open instances of one key: queued (enqueued,
// not started) and started (not ended).
type openInstance struct {
	act, inst       string
	queued, started int
}

// maxStepInstances bounds the keys with open instances one case tracks;
// past it an event of another key is a step.
const maxStepInstances = 64

// Step reports whether e is a step of its case's trace, and records the
// instances it opens and closes.
func (s *Steps) Step(e *schema.Event) bool {
	if e.Activity == "" {
		return false
	}
	var o *openInstance
	for j := range s.open {
		if s.open[j].act == e.Activity && s.open[j].inst == e.InstanceID {
			o = &s.open[j]
			break
		}
	}
	if o == nil {
		switch e.Type {
		case schema.Enqueue, schema.Start:
			if len(s.open) < maxStepInstances {
				s.open = append(s.open, openInstance{act: strings.Clone(e.Activity), inst: strings.Clone(e.InstanceID)})
				o = &s.open[len(s.open)-1]
			}
		}
	}
	if o == nil {
		return true
	}
	switch e.Type {
	case schema.Enqueue:
		o.queued++
		return true
	case schema.Start:
		if o.queued > 0 {
			o.queued--
			o.started++
			return false
		}
		o.started++
		return true
	case schema.Complete:
		switch {
		case o.started > 0:
			o.started--
			return false
		case o.queued > 0: // its start is lost: the instance still ends here
			o.queued--
			return false
		}
	case schema.Abandon:
		if o.queued > 0 {
			o.queued--
			return false
		}
	}
	return true
}

// Reset forgets the case in hand.
func (s *Steps) Reset() { s.open = s.open[:0] }
