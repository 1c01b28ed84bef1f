package quality

import (
	"encoding/json"
	"slices"
	"time"
)

// RunGapHours is the longest stretch of hours without an event of a site
// inside one run of its hourly series (31 days). A longer silence starts
// a new run, so that the series holds the hours near events and never the
// span between a far-dated event and the rest: its size is bounded by the
// hours with events times this gap, not by the time they span.
const RunGapHours = 31 * 24

// FarHours is how far (366 days) a run of a site's events must lie from
// the site's main run (the one with the most events) for its events to be
// far instants: a finding, left out of the gap rule.
const FarHours = 366 * 24

// HourSeries counts a site's events per UTC hour, in runs of consecutive
// hours separated by more than [RunGapHours] without an event. Each run
// starts and ends on an hour with events.
type HourSeries struct {
	Runs   []HourRun `json:"runs"`
	Beyond int64     `json:"beyond"` // events past the series' size limit (MaxHours)
}

// HourRun is one run of an [HourSeries]: Counts[i] events in the hour
// starting Start + i hours.
type HourRun struct {
	Start  time.Time `json:"start"`
	Counts []int64   `json:"counts"`
}

// UnmarshalJSON reads a series, also in the form of report version 2 (one
// dense series from start), which it splits into runs.
func (h *HourSeries) UnmarshalJSON(b []byte) error {
	var x struct {
		Runs   []HourRun  `json:"runs"`
		Beyond int64      `json:"beyond"`
		Start  *time.Time `json:"start"`
		Counts []int64    `json:"counts"`
	}
	if err := json.Unmarshal(b, &x); err != nil {
		return err
	}
	h.Runs, h.Beyond = x.Runs, x.Beyond
	if x.Start != nil && len(x.Counts) > 0 {
		h.Runs = mergeRuns(h.Runs, splitRuns(HourRun{Start: x.Start.UTC(), Counts: x.Counts}))
	}
	if h.Runs == nil {
		h.Runs = []HourRun{}
	}
	return nil
}

// end is the hour after the run's last.
func (r HourRun) end() time.Time { return r.Start.Add(time.Duration(len(r.Counts)) * time.Hour) }

// events is the run's number of events.
func (r HourRun) events() int64 {
	var n int64
	for _, c := range r.Counts {
		n += c
	}
	return n
}

// splitRuns cuts a dense series at silences longer than RunGapHours and
// trims empty hours at both ends of each piece.
func splitRuns(r HourRun) []HourRun {
	var out []HourRun
	first, last, zeros := -1, -1, 0
	flush := func() {
		if first >= 0 {
			out = append(out, HourRun{Start: r.Start.Add(time.Duration(first) * time.Hour), Counts: slices.Clone(r.Counts[first : last+1])})
		}
		first, last = -1, -1
	}
	for i, c := range r.Counts {
		if c == 0 {
			zeros++
			continue
		}
		if first >= 0 && zeros > RunGapHours {
			flush()
		}
		if first < 0 {
			first = i
		}
		last, zeros = i, 0
	}
	flush()
	return out
}

// mergeRuns adds two run lists: runs that overlap or lie within
// RunGapHours of each other become one.
func mergeRuns(a, b []HourRun) []HourRun {
	all := append(slices.Clone(a), b...)
	slices.SortStableFunc(all, func(x, y HourRun) int { return x.Start.Compare(y.Start) })
	var out []HourRun
	for _, r := range all {
		if len(r.Counts) == 0 {
			continue
		}
		if n := len(out); n > 0 && !r.Start.After(out[n-1].end().Add(RunGapHours*time.Hour)) {
			cur := &out[n-1]
			off := int(r.Start.Sub(cur.Start) / time.Hour)
			for need := off + len(r.Counts); len(cur.Counts) < need; {
				cur.Counts = append(cur.Counts, 0)
			}
			for i, c := range r.Counts {
				cur.Counts[off+i] += c
			}
			continue
		}
		out = append(out, HourRun{Start: r.Start, Counts: slices.Clone(r.Counts)})
	}
	if out == nil {
		out = []HourRun{}
	}
	return out
}

func mergeHours(a, b HourSeries) HourSeries {
	return HourSeries{Runs: mergeRuns(a.Runs, b.Runs), Beyond: a.Beyond + b.Beyond}
}

// hourAcc builds a site's hourly series from events in time order.
type hourAcc struct {
	runs  []hourRunAcc
	total int   // hours held over all runs
	out   int64 // events past the limit
}

type hourRunAcc struct {
	start  int64 // unix hour
	counts []uint32
}

// add counts an event in unix hour h; h never decreases (Observe sees
// events in time order). At most max hours are held.
func (s *hourAcc) add(h int64, max int) {
	if n := len(s.runs); n > 0 {
		r := &s.runs[n-1]
		i := h - r.start
		if i >= 0 && i < int64(len(r.counts)) {
			r.counts[i]++
			return
		}
		if i >= int64(len(r.counts)) && i-int64(len(r.counts)) < RunGapHours {
			grow := int(i) + 1 - len(r.counts)
			if s.total+grow > max {
				s.out++
				return
			}
			for range grow {
				r.counts = append(r.counts, 0)
			}
			s.total += grow
			r.counts[i]++
			return
		}
		if i < 0 {
			s.out++ // not in time order; the order check reports it
			return
		}
	}
	if s.total+1 > max {
		s.out++
		return
	}
	s.runs = append(s.runs, hourRunAcc{start: h, counts: append(make([]uint32, 0, 64), 1)})
	s.total++
}

// series is the accumulated series.
func (s *hourAcc) series() HourSeries {
	h := HourSeries{Runs: make([]HourRun, 0, len(s.runs)), Beyond: s.out}
	for _, r := range s.runs {
		run := HourRun{Start: time.Unix(r.start*3600, 0).UTC(), Counts: make([]int64, len(r.counts))}
		for i, c := range r.counts {
			run.Counts[i] = int64(c)
		}
		h.Runs = append(h.Runs, run)
	}
	return h
}

// farRuns returns, of a site's runs, how many events lie in runs more
// than FarHours from its main run (the one with the most events, the
// earliest of equals), with the start of each such run as a sample.
func farRuns(h HourSeries, site string, maxSamples int) (far int64, samples []Sample) {
	if len(h.Runs) < 2 {
		return 0, nil
	}
	main := 0
	for i, r := range h.Runs {
		if r.events() > h.Runs[main].events() {
			main = i
		}
	}
	m := h.Runs[main]
	gap := FarHours * time.Hour
	for i, r := range h.Runs {
		if i == main {
			continue
		}
		if r.Start.After(m.end().Add(gap)) || r.end().Add(gap).Before(m.Start) {
			far += r.events()
			if len(samples) < maxSamples {
				samples = append(samples, Sample{Site: site, At: timePtr(r.Start)})
			}
		}
	}
	return far, samples
}
