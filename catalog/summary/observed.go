package summary

import (
	"slices"
	"sort"
	"time"
)

// ObservationGap is the longest silence (in event time) inside one
// observed stretch: events further apart than this are in different
// stretches, and the days between are not observed. So one far-dated
// event adds its own day, not every day up to it, and the state grows
// with the days that have events, never with the span.
const ObservationGap = 30 * 24 * time.Hour

// observedJoinDays: ranges of observed days at most this many days apart
// (ObservationGap) are one stretch, the days between observed. So the days
// observed depend only on the days with events, however the events were
// cut into files: a stretch of one pass over all events is the union of
// the files' ranges joined across such gaps.
const observedJoinDays = int32(ObservationGap / (24 * time.Hour))

// dayRange is the local days first..last, both included, and the instants
// (µs) of the first and last event in them.
type dayRange struct {
	first, last int32
	from, to    int64
}

// join widens r to hold o.
func (r *dayRange) join(o dayRange) {
	r.first, r.last = min(r.first, o.first), max(r.last, o.last)
	r.from, r.to = min(r.from, o.from), max(r.to, o.to)
}

// observed is a set of local days kept as sorted ranges more than
// observedJoinDays apart.
type observed []dayRange

// add unites r into o.
func (o *observed) add(r dayRange) {
	s := *o
	n := len(s)
	// Fast paths: in time order, r follows or joins the last range.
	if n == 0 || r.first > s[n-1].last+observedJoinDays {
		*o = append(s, r)
		return
	}
	if r.first >= s[n-1].first {
		s[n-1].join(r)
		return
	}
	// The ranges r touches are i..j-1; they become one.
	i := sort.Search(n, func(k int) bool { return s[k].last+observedJoinDays >= r.first })
	j := i
	for j < n && s[j].first <= r.last+observedJoinDays {
		r.join(s[j])
		j++
	}
	*o = slices.Replace(s, i, j, r)
}

// days is the number of days observed.
func (o observed) days() int {
	n := 0
	for _, r := range o {
		n += int(r.last-r.first) + 1
	}
	return n
}

// weekdays counts the observed days by day of week (0 = Monday, as
// hours of the week are numbered), without visiting each day.
func (o observed) weekdays() [7]int {
	var w [7]int
	for _, r := range o {
		n := int(r.last-r.first) + 1
		for k := range 7 {
			w[k] += n / 7
		}
		for d := r.first; d < r.first+int32(n%7); d++ {
			w[((d+3)%7+7)%7]++
		}
	}
	return w
}
