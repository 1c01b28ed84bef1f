package summary

import (
	"maps"
	"math"
	"math/big"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// FormatVersion is the version of the Summary JSON layout.
const FormatVersion = "3"

// Summary is the operational summary of the events an accumulator has
// seen. SUMMARY.md documents every field; durations are in seconds, rates
// in arrivals per hour, load in erlangs.
type Summary struct {
	FormatVersion  string            `json:"format_version"`
	Timezone       string            `json:"timezone"`
	From           *time.Time        `json:"from,omitempty"` // first event
	To             *time.Time        `json:"to,omitempty"`   // last event
	ExposureHours  int               `json:"exposure_hours"` // real hours from the first event's to the last's
	Events         uint64            `json:"events"`
	EventTypes     map[string]uint64 `json:"event_types"`
	OtherTypes     uint64            `json:"other_types"`
	OutOfOrder     uint64            `json:"out_of_order"`
	Cases          Count             `json:"cases"`
	Subjects       Count             `json:"subjects"`
	Resources      Count             `json:"resources"`
	WaitThresholds []float64         `json:"wait_thresholds"` // seconds
	Arrivals       Arrivals          `json:"arrivals"`
	Sites          []SiteSummary     `json:"sites"`
	Queues         []QueueSummary    `json:"queues"`
	Activities     []ActivitySummary `json:"activities"`
	LengthOfStay   LengthOfStay      `json:"length_of_stay"`
	EventsPerCase  Spread            `json:"events_per_case"`
	BetweenEvents  Durations         `json:"between_events"` // time between consecutive events of a case
	Occupancy      Occupancy         `json:"occupancy"`
	// Excluded counts the events left out of the summary (SUMMARY.md):
	// dated later than their upload or outside the dataset's window (out
	// of every figure), exact copies (out of the case figures).
	Excluded Excluded `json:"excluded"`
	// Process holds the process views (directly-follows pairs, variants,
	// workload, handovers) of a per-case pass; absent when none ran.
	Process *Process `json:"process,omitempty"`
	// NotMeasurable names the figures the log's events cannot measure,
	// with why (a log of completions alone has no waits or services);
	// those figures are then absent or empty, never zeros to be read as
	// measured.
	NotMeasurable []NotMeasurable `json:"not_measurable"`
}

// Excluded counts the events a summary left out.
type Excluded struct {
	LaterThanUpload uint64 `json:"later_than_upload"`
	OutsideWindow   uint64 `json:"outside_window"`
	ExactDuplicates uint64 `json:"exact_duplicates"`
}

// Spread is a distribution of counts.
type Spread struct {
	N    uint64  `json:"n"`
	Mean float64 `json:"mean"`
	Min  float64 `json:"min"`
	Max  float64 `json:"max"`
	P50  float64 `json:"p50"` // Hyndman-Fan type 7
	P90  float64 `json:"p90"`
}

// NotMeasurable is a figure the events cannot measure, and why.
type NotMeasurable struct {
	Figure string `json:"figure"`
	Why    string `json:"why"`
}

// Count is a distinct count: exact, or a HyperLogLog estimate with the
// stated relative standard error.
type Count struct {
	Value       float64 `json:"value"`
	Exact       bool    `json:"exact"`
	RelStdError float64 `json:"rel_std_error"` // 0 when exact
}

// Rate is the mean number of arrivals per hour in one hour bin over the
// hours of exposure behind it, with its exact Poisson 95% interval.
type Rate struct {
	Count uint64  `json:"count"` // arrivals in the bin
	Hours int     `json:"hours"` // hours of exposure behind the bin
	Mean  float64 `json:"mean"`  // Count / Hours, arrivals per hour
	Lower float64 `json:"lower"` // Garwood lower bound / Hours
	Upper float64 `json:"upper"` // Garwood upper bound / Hours
}

// DayCount is the number of arrivals of one local calendar day.
type DayCount struct {
	Date  string `json:"date"` // YYYY-MM-DD, local
	Count uint64 `json:"count"`
}

// Profile is an arrival profile: 168 hours of the week (0 = Monday
// 00:00-01:00 local) and 24 hours of the day.
type Profile struct {
	Total      uint64 `json:"total"`
	HourOfWeek []Rate `json:"hour_of_week"`
	HourOfDay  []Rate `json:"hour_of_day"`
}

// Arrivals is the arrival profile of all sites with the count per day.
type Arrivals struct {
	Profile
	PerDay []DayCount `json:"per_day"`
}

// SiteSummary is what happened at one site.
type SiteSummary struct {
	Name     string  `json:"name"`
	Events   uint64  `json:"events"`
	Arrivals Profile `json:"arrivals"`
}

// Durations describes a distribution of durations in seconds.
type Durations struct {
	N        uint64  `json:"n"`
	Mean     float64 `json:"mean"`
	SD       float64 `json:"sd"` // n-1 in the denominator
	Min      float64 `json:"min"`
	Max      float64 `json:"max"`
	P50      float64 `json:"p50"` // Hyndman-Fan type 7
	P90      float64 `json:"p90"`
	P95      float64 `json:"p95"`
	P99      float64 `json:"p99"`
	Exact    bool    `json:"exact"`     // quantiles from exact values
	RelError float64 `json:"rel_error"` // bound on the quantiles' relative error; 0 when exact
	Negative uint64  `json:"negative"`  // durations < 0 (clock disorder), left out
}

// Threshold is the share of served waits longer than a threshold.
type Threshold struct {
	Seconds float64 `json:"seconds"`
	Count   uint64  `json:"count"`
	Share   float64 `json:"share"`
}

// Wait describes the waits of a queue that ended in a start.
type Wait struct {
	Durations
	WaitedShare  float64     `json:"waited_share"` // share of served waits > 0
	Over         []Threshold `json:"over"`
	Abandoned    uint64      `json:"abandoned"`
	AbandonShare float64     `json:"abandon_share"` // abandoned / (served + abandoned)
	// Histogram bins the served waits on the 1-2-5 axis of LengthOfStay;
	// nil without any.
	Histogram *Histogram `json:"histogram,omitempty"`
}

// QueueSummary is what happened in one queue.
type QueueSummary struct {
	Name        string    `json:"name"`
	Events      uint64    `json:"events"`
	Arrivals    Profile   `json:"arrivals"`
	Wait        Wait      `json:"wait"`
	Patience    *KMCurve  `json:"patience,omitempty"` // time to abandon; served cases censored at their wait
	Services    uint64    `json:"services"`           // services started from the queue and completed
	MeanService float64   `json:"mean_service"`       // seconds
	OfferedLoad []float64 `json:"offered_load"`       // 168 hours of the week, erlangs
}

// Lognormal is the maximum-likelihood lognormal fit of the positive
// durations (exact: from running moments of their logarithms), with the
// Kolmogorov-Smirnov distance of the fit (from the exact values up to
// ExactValues distinct ones, then from the sketch).
type Lognormal struct {
	N       uint64  `json:"n"`
	MeanLog float64 `json:"meanlog"`
	SDLog   float64 `json:"sdlog"` // n in the denominator
	KS      float64 `json:"ks"`
}

// ActivitySummary is what happened in one activity.
type ActivitySummary struct {
	Name      string     `json:"name"`
	Events    uint64     `json:"events"`
	Service   Durations  `json:"service"`
	Lognormal *Lognormal `json:"lognormal,omitempty"`
	// Histogram bins the service times on the 1-2-5 axis of
	// LengthOfStay; nil without any.
	Histogram *Histogram `json:"histogram,omitempty"`
}

// Histogram counts values in bins [Edges[i], Edges[i+1]).
type Histogram struct {
	Edges  []float64 `json:"edges"` // seconds
	Counts []uint64  `json:"counts"`
}

// LengthOfStay is the distribution of the time from a case's first to its
// last event, with a histogram on a 1-2-5 log axis.
type LengthOfStay struct {
	Durations
	Histogram Histogram `json:"histogram"`
}

// Occupancy is the number of cases in system over time.
type Occupancy struct {
	Resolution float64 `json:"resolution"` // seconds per bucket
	// Runs hold the series over each observed stretch (see
	// ObservationGap); the silences between are left out.
	Runs       []OccupancyRun `json:"runs"`
	HourOfWeek []float64      `json:"hour_of_week"` // mean of the series by the hour of week of the bucket start
	Peak       float64        `json:"peak"`         // largest bucket average
	PeakAt     *time.Time     `json:"peak_at,omitempty"`
	Little     Little         `json:"little"`
}

// OccupancyRun is the occupancy series over one observed stretch.
type OccupancyRun struct {
	Start  time.Time `json:"start"`
	Series []float64 `json:"series"` // time-average number in system per bucket
}

// Little checks L = λW over [From, To] with its two sides measured apart
// (SUMMARY.md): L is the time-average census, each entry counted until
// its exit (departure, abandon, a transfer ending the case, a type the
// profile declares terminal) or, without one, until To; λW is the entries
// per second times their mean stay, a stay without an exit ending at its
// case's last event. They differ by the time cases stayed in the census
// after they were last seen: lost exits.
type Little struct {
	Seconds float64 `json:"seconds"` // T = To - From
	Entries uint64  `json:"entries"` // stays begun
	Exits   uint64  `json:"exits"`   // stays ended by an exit
	Open    uint64  `json:"open"`    // stays without an exit
	L       float64 `json:"l"`       // time-average census
	Lambda  float64 `json:"lambda"`  // entries per second
	W       float64 `json:"w"`       // mean stay, seconds
	LambdaW float64 `json:"lambda_w"`
	Ratio   float64 `json:"ratio"` // L / (λW)
	// Judged: both sides are measured (at least LittleMinStays entries and
	// as many exits, over a span of at least LittleMinSpan mean stays), so
	// the ratio says something about the data.
	Judged bool `json:"judged"`
}

// Little's law is judged on at least LittleMinStays entries and exits over
// a span of at least LittleMinSpan mean stays (the window's edges then
// weigh little; the quality report uses the same rule).
const (
	LittleMinStays = 30
	LittleMinSpan  = 10.0
)

// Selection restricts a summary's groups to the named sites, queues and
// activities; an empty list keeps all. Totals are never restricted: for a
// filtered total, observe the filtered events in a fresh accumulator.
type Selection struct {
	Sites      []string
	Queues     []string
	Activities []string
}

func keep(list []string, name string) bool { return len(list) == 0 || slices.Contains(list, name) }

// Summary returns the summary of everything observed and merged. It
// closes every open case first (see [Accumulator]).
func (a *Accumulator) Summary() *Summary { return a.SummaryFor(Selection{}) }

// SummaryFor is [Accumulator.Summary] with the groups restricted to sel.
func (a *Accumulator) SummaryFor(sel Selection) *Summary {
	a.finish()
	hours, week := a.exposure()
	s := &Summary{
		FormatVersion: FormatVersion,
		Timezone:      a.loc.String(),
		ExposureHours: hours,
		Events:        a.events,
		EventTypes:    map[string]uint64{},
		OtherTypes:    a.otherTypes,
		OutOfOrder:    a.outOfOrder,
		Cases:         countOf(a.cases),
		Subjects:      countOf(a.subjects),
		Resources:     countOf(a.resources),
	}
	if c := a.counted; c != nil {
		s.Cases = Count{Value: float64(c.Cases), Exact: true}
		s.Subjects = Count{Value: float64(c.Subjects), Exact: true}
		s.Resources = Count{Value: float64(c.Resources), Exact: true}
		s.Excluded = Excluded{LaterThanUpload: c.LaterThanUpload, OutsideWindow: c.OutsideWindow, ExactDuplicates: c.ExactDuplicates}
	}
	for i, t := range schema.EventTypes {
		s.EventTypes[string(t)] = a.types[i]
	}
	for _, t := range a.thr {
		s.WaitThresholds = append(s.WaitThresholds, float64(t)/usPerSec)
	}
	if a.hasTime {
		f, t := time.UnixMicro(a.minAt).In(a.loc), time.UnixMicro(a.maxAt).In(a.loc)
		s.From, s.To = &f, &t
	}
	ci := poissonCache{}
	s.Arrivals.Profile = ci.profile(&a.arrWeek, &week)
	for _, d := range slices.Sorted(maps.Keys(a.arrDay)) {
		s.Arrivals.PerDay = append(s.Arrivals.PerDay, DayCount{
			Date: time.Unix(int64(d)*86400, 0).UTC().Format("2006-01-02"), Count: a.arrDay[d]})
	}
	for _, g := range sortedGroups(a.sites.list, func(g *siteGroup) string { return g.name }) {
		if keep(sel.Sites, g.name) {
			s.Sites = append(s.Sites, SiteSummary{Name: g.name, Events: g.events, Arrivals: ci.profile(&g.arr, &week)})
		}
	}
	for _, g := range sortedGroups(a.queues.list, func(g *queueGroup) string { return g.name }) {
		if keep(sel.Queues, g.name) {
			s.Queues = append(s.Queues, a.queueSummary(g, &ci, &week))
		}
	}
	for _, g := range sortedGroups(a.acts.list, func(g *activityGroup) string { return g.name }) {
		if !keep(sel.Activities, g.name) {
			continue
		}
		as := ActivitySummary{Name: g.name, Events: g.events, Service: durationsOf(g.svc)}
		as.Service.Negative = g.negative
		as.Lognormal = lognormalOf(g.svc)
		if g.svc.n > 0 {
			h := logHistogram(g.svc)
			as.Histogram = &h
		}
		s.Activities = append(s.Activities, as)
	}
	s.LengthOfStay = LengthOfStay{Durations: durationsOf(a.los), Histogram: logHistogram(a.los)}
	if ev := durationsOf(a.evCase); ev.N > 0 {
		// evCase holds counts where durationsOf expects µs.
		s.EventsPerCase = Spread{N: ev.N, Mean: ev.Mean * usPerSec, Min: ev.Min * usPerSec, Max: ev.Max * usPerSec, P50: ev.P50 * usPerSec, P90: ev.P90 * usPerSec}
	}
	s.BetweenEvents = durationsOf(a.between)
	s.NotMeasurable = []NotMeasurable{}
	var waits, services uint64
	for _, g := range a.queues.list {
		waits += g.served.n + g.abandoned.n + g.negative
	}
	for _, g := range a.acts.list {
		services += g.svc.n + g.negative
	}
	if a.events > 0 && waits == 0 {
		s.NotMeasurable = append(s.NotMeasurable, NotMeasurable{Figure: "waits",
			Why: "no arrival, enqueue or transfer is followed by a start or an abandon in the same case"})
	}
	if a.events > 0 && services == 0 {
		s.NotMeasurable = append(s.NotMeasurable, NotMeasurable{Figure: "services",
			Why: "no start is followed by a complete of the same activity in the same case"})
	}
	s.Occupancy = a.occupancy()
	if a.process != nil {
		s.Process = a.process.Result()
	}
	if a.events > 0 && s.Occupancy.Little.Exits == 0 {
		s.NotMeasurable = append(s.NotMeasurable, NotMeasurable{Figure: "littles_law",
			Why: "no case leaves by a departure, an abandon, a final transfer or a type the profile declares terminal, so the census never falls"})
	}
	return s
}

func sortedGroups[T any](list []*T, name func(*T) string) []*T {
	out := slices.Clone(list)
	slices.SortFunc(out, func(x, y *T) int {
		a, b := name(x), name(y)
		switch {
		case a < b:
			return -1
		case a > b:
			return 1
		}
		return 0
	})
	return out
}

func countOf(d *distinct) Count {
	n, exact := d.count()
	c := Count{Value: n, Exact: exact}
	if !exact {
		c.RelStdError = HLLRelStdError
	}
	return c
}

// poissonCache memoizes Garwood intervals by count within one summary.
type poissonCache map[uint64][2]float64

func (p poissonCache) rate(k uint64, hours int) Rate {
	r := Rate{Count: k, Hours: hours}
	if hours == 0 {
		return r
	}
	ci, ok := p[k]
	if !ok {
		ci[0], ci[1] = PoissonExactCI(k, 0.95)
		p[k] = ci
	}
	d := float64(hours)
	r.Mean, r.Lower, r.Upper = float64(k)/d, ci[0]/d, ci[1]/d
	return r
}

func (p poissonCache) profile(w *[168]uint64, week *[168]int) Profile {
	pr := Profile{HourOfWeek: make([]Rate, 168), HourOfDay: make([]Rate, 24)}
	var day [24]uint64
	var dayHours [24]int
	for h, c := range w {
		pr.Total += c
		day[h%24] += c
		dayHours[h%24] += week[h]
		pr.HourOfWeek[h] = p.rate(c, week[h])
	}
	for h, c := range day {
		pr.HourOfDay[h] = p.rate(c, dayHours[h])
	}
	return pr
}

func (a *Accumulator) queueSummary(g *queueGroup, ci *poissonCache, week *[168]int) QueueSummary {
	q := QueueSummary{Name: g.name, Events: g.events, Arrivals: ci.profile(&g.arr, week)}
	q.Wait.Durations = durationsOf(g.served)
	if g.served.n > 0 {
		h := logHistogram(g.served)
		q.Wait.Histogram = &h
	}
	q.Wait.Negative = g.negative
	n := g.served.n
	if n > 0 {
		q.Wait.WaitedShare = float64(n-g.served.zero) / float64(n)
	}
	for i, t := range a.thr {
		th := Threshold{Seconds: float64(t) / usPerSec, Count: g.over[i]}
		if n > 0 {
			th.Share = float64(g.over[i]) / float64(n)
		}
		q.Wait.Over = append(q.Wait.Over, th)
	}
	q.Wait.Abandoned = g.abandoned.n
	if tot := n + g.abandoned.n; tot > 0 {
		q.Wait.AbandonShare = float64(g.abandoned.n) / float64(tot)
		km := patience(g.served, g.abandoned)
		q.Patience = &km
	}
	q.Services = g.svcN
	if g.svcN > 0 {
		q.MeanService = g.svcSum.float() / float64(g.svcN) / usPerSec
	}
	q.OfferedLoad = make([]float64, 168)
	for h := range q.OfferedLoad {
		if d := week[h]; d > 0 {
			q.OfferedLoad[h] = float64(g.arr[h]) / float64(d) * q.MeanService / 3600
		}
	}
	return q
}

// patience is the Kaplan-Meier curve of the time to abandon: abandonments
// are events, served waits are censored. When either distribution is
// collapsed, both are put on the bucket grid.
func patience(served, abandoned *dist) KMCurve {
	type dc struct{ d, c uint64 }
	at := map[float64]*dc{}
	get := func(v float64) *dc {
		x := at[v]
		if x == nil {
			x = &dc{}
			at[v] = x
		}
		return x
	}
	if served.exact != nil && abandoned.exact != nil {
		for _, p := range served.points() {
			get(p.v).c += p.c
		}
		for _, p := range abandoned.points() {
			get(p.v).d += p.c
		}
	} else {
		for _, x := range []struct {
			d     *dist
			event bool
		}{{served, false}, {abandoned, true}} {
			add := func(v float64, c uint64) {
				if x.event {
					get(v).d += c
				} else {
					get(v).c += c
				}
			}
			if x.d.zero > 0 {
				add(0, x.d.zero)
			}
			for b, c := range x.d.bucketPoints() {
				add(bucketValue(b)/usPerSec, c)
			}
		}
	}
	ts := slices.Sorted(maps.Keys(at))
	d, c := make([]uint64, len(ts)), make([]uint64, len(ts))
	for i, t := range ts {
		d[i], c[i] = at[t].d, at[t].c
	}
	km, _ := KaplanMeierCounts(ts, d, c)
	return km
}

func durationsOf(d *dist) Durations {
	out := Durations{N: d.n, Exact: d.exact != nil}
	if !out.Exact {
		out.RelError = sketchAlpha
	}
	if d.n == 0 {
		return out
	}
	out.Mean, out.SD = d.meanSD()
	out.Min, out.Max = float64(d.min)/usPerSec, float64(d.max)/usPerSec
	pts := d.points()
	q := func(p float64) float64 {
		// Bucket representatives may stray past the exact extremes.
		return math.Min(out.Max, math.Max(out.Min, quantile7Counts(pts, d.n, p)))
	}
	out.P50, out.P90, out.P95, out.P99 = q(0.5), q(0.9), q(0.95), q(0.99)
	return out
}

func lognormalOf(d *dist) *Lognormal {
	n := d.n - d.zero
	if n == 0 {
		return nil
	}
	// The MLE from the exact sums of the (fixed-point) logarithms: meanlog
	// = Σq/n, sdlog² = (Σq² − (Σq)²/n)/n, in microseconds, then moved to
	// seconds (− ln 10⁶), whatever the size of the sample.
	nb := new(big.Int).SetUint64(n)
	sq := d.lq.big()
	num := new(big.Int).Mul(d.lq2.big(), nb) // n·Σq² − (Σq)²
	num.Sub(num, new(big.Int).Mul(sq, sq))
	v, _ := new(big.Float).Quo(new(big.Float).SetInt(num), new(big.Float).SetInt(new(big.Int).Mul(nb, nb))).Float64()
	m, _ := new(big.Float).Quo(new(big.Float).SetInt(sq), new(big.Float).SetInt(nb)).Float64()
	mu := m/lnScale - math.Log(usPerSec)
	sd := math.Sqrt(max(v, 0)) / lnScale
	ln := &Lognormal{N: n, MeanLog: mu, SDLog: sd}
	if sd > 0 {
		// The KS distance is taken against the distribution's points:
		// exact values up to ExactValues distinct ones, then the sketch's
		// buckets (relative error 0.5%).
		pts := d.points()
		if len(pts) > 0 && pts[0].v == 0 {
			pts = pts[1:]
		}
		ln.KS = ksCounts(pts, n, func(x float64) float64 { return LognormalCDF(x, mu, sd) })
	}
	return ln
}

// logHistogram bins d on edges 0, 1, 2, 5, 10, 20, 50, ... seconds, up to
// the first edge above the maximum.
func logHistogram(d *dist) Histogram {
	h := Histogram{}
	if d.n == 0 {
		return h
	}
	maxV := float64(d.max) / usPerSec
	h.Edges = []float64{0}
	for e, k := 1.0, 0; ; k++ {
		h.Edges = append(h.Edges, e)
		if e > maxV {
			break
		}
		switch k % 3 {
		case 0, 2:
			e *= 2
		case 1:
			e *= 2.5
		}
	}
	h.Counts = make([]uint64, len(h.Edges)-1)
	for _, p := range d.points() {
		i, _ := slices.BinarySearch(h.Edges, p.v)
		if i < len(h.Edges) && h.Edges[i] == p.v {
			i++
		}
		h.Counts[max(0, min(i-1, len(h.Counts)-1))] += p.c
	}
	return h
}

func (a *Accumulator) occupancy() Occupancy {
	o := Occupancy{Resolution: float64(a.res) / usPerSec, HourOfWeek: make([]float64, 168), Runs: []OccupancyRun{}}
	if len(a.occ) == 0 {
		return o
	}
	keys := slices.Sorted(maps.Keys(a.occ))
	first, last := keys[0], keys[len(keys)-1]
	var n int64 // number in system at the bucket start
	var sums [168]float64
	var cnt [168]int
	w := float64(a.res)
	cur, k := first, 0 // next bucket not yet stepped; next key
	// step moves past bucket b (== cur) and returns its mean.
	step := func(b int64) float64 {
		ar := float64(n) * w
		if k < len(keys) && keys[k] == b {
			x := a.occ[b]
			ar += float64(x.arrRest - x.depRest)
			n += int64(x.arr) - int64(x.dep)
			k++
		}
		cur = b + 1
		return ar / w
	}
	// skip moves past the buckets before b without a series: a silence,
	// where only keys (none, as keys lie in observed days) change n.
	skip := func(b int64) {
		for k < len(keys) && keys[k] < b {
			cur = keys[k]
			step(cur)
		}
		if b > cur {
			cur = b
		}
	}
	for _, r := range a.days {
		b0 := max(floorDiv(a.dayStart(r.first), a.res), cur, first)
		b1 := min(floorDiv(a.dayStart(r.last+1)-1, a.res), last)
		if b0 > b1 {
			continue
		}
		skip(b0)
		run := OccupancyRun{Start: time.UnixMicro(b0 * a.res).In(a.loc)}
		for b := b0; b <= b1; b++ {
			m := step(b)
			run.Series = append(run.Series, m)
			how, _ := a.local(b * a.res)
			sums[how] += m
			cnt[how]++
			if m > o.Peak || o.PeakAt == nil {
				t := time.UnixMicro(b * a.res).In(a.loc)
				o.Peak, o.PeakAt = m, &t
			}
		}
		o.Runs = append(o.Runs, run)
	}
	skip(last + 1)
	for h := range sums {
		if cnt[h] > 0 {
			o.HourOfWeek[h] = sums[h] / float64(cnt[h])
		}
	}
	o.Little = a.little()
	return o
}

// little computes both sides of Little's law from the census sums.
func (a *Accumulator) little() Little {
	c := &a.census
	T := float64(a.maxAt-a.minAt) / usPerSec
	l := Little{Seconds: T, Entries: c.stays, Exits: c.exits, Open: c.open}
	if T <= 0 || c.stays == 0 {
		return l
	}
	// L·T = present + Σ open (To − entry); λW·T = present + Σ open (last − entry).
	open := new(big.Int).SetUint64(c.open)
	end := new(big.Int).Mul(open, big.NewInt(a.maxAt+instantShift))
	census := new(big.Int).Add(c.present.big(), end.Sub(end, c.openSince.big()))
	seen := new(big.Int).Add(c.present.big(), new(big.Int).Sub(c.openLast.big(), c.openSince.big()))
	cf, _ := new(big.Float).SetInt(census).Float64()
	sf, _ := new(big.Float).SetInt(seen).Float64()
	l.L = cf / usPerSec / T
	l.Lambda = float64(c.stays) / T
	l.W = sf / usPerSec / float64(c.stays)
	l.LambdaW = l.Lambda * l.W
	if l.LambdaW > 0 {
		l.Ratio = l.L / l.LambdaW
	}
	l.Judged = c.stays >= LittleMinStays && c.exits >= LittleMinStays && l.W > 0 && T >= LittleMinSpan*l.W
	return l
}

// dayStart is the instant (µs) local day d begins.
func (a *Accumulator) dayStart(d int32) int64 {
	return time.Date(1970, 1, 1+int(d), 0, 0, 0, 0, a.loc).UnixMicro()
}
