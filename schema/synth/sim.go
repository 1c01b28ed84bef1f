package synth

import (
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// day generates one site's cases for one local day.
type day struct {
	site    *Site
	siteIdx int
	day     int
	seed    uint64
	start   time.Time // local midnight
	end     time.Time // next local midnight
	loc     *time.Location
	rng     *rand.Rand
}

// visit is one case as the simulation sees it.
type visit struct {
	n         int
	caseRef   string
	subject   string
	arrive    time.Time
	next      time.Time // when the case joins its next queue
	line      string
	channel   string
	priority  string
	outcome   string
	steps     []served
	abandoned bool
	abandonAt time.Time
	depart    time.Time // zero when the site writes no departure or the case abandoned
}

// served is one step of a visit: the enqueue, and the service when it began.
type served struct {
	enq, start, end time.Time
	staff           string
	ok              bool // false: the case abandoned this step's queue
}

// mix is a 64-bit finaliser that turns structured inputs into well-spread
// PCG stream selectors.
func mix(x uint64) uint64 {
	x ^= x >> 30
	x *= 0xbf58476d1ce4e5b9
	x ^= x >> 27
	x *= 0x94d049bb133111eb
	x ^= x >> 31
	return x
}

func newDay(seed uint64, s *Site, idx, d int, start time.Time) *day {
	y, m, dd := start.Date()
	return &day{
		site: s, siteIdx: idx, day: d, seed: seed,
		start: start,
		end:   time.Date(y, m, dd+1, 0, 0, 0, 0, start.Location()),
		loc:   start.Location(),
		rng:   rand.New(rand.NewPCG(seed, mix(uint64(idx)<<40|uint64(d)))),
	}
}

func minutes(m float64) time.Duration { return time.Duration(m * float64(time.Minute)) }

func (g *day) uniform(r [2]float64) time.Duration {
	return minutes(r[0] + (r[1]-r[0])*g.rng.Float64())
}

func pick(rng *rand.Rand, ws []Weighted) string {
	if len(ws) == 0 {
		return ""
	}
	total := 0.0
	for _, w := range ws {
		total += w.Weight
	}
	u := rng.Float64() * total
	for _, w := range ws {
		if u < w.Weight {
			return w.Value
		}
		u -= w.Weight
	}
	return ws[len(ws)-1].Value
}

// clockHour is the fractional local clock hour of t.
func clockHour(t time.Time, loc *time.Location) float64 {
	lt := t.In(loc)
	return float64(lt.Hour()) + float64(lt.Minute())/60 + float64(lt.Second())/3600
}

func weekend(t time.Time) bool {
	wd := t.Weekday()
	return wd == time.Saturday || wd == time.Sunday
}

// arrivals draws the day's arrival instants from the non-homogeneous
// Poisson process with rate Site.Rate by thinning: candidates come from a
// homogeneous process at the bound rate and each is kept with probability
// rate(t)/bound.
func (g *day) arrivals() []time.Time {
	we := weekend(g.start)
	bound := g.site.rateBound(we)
	if bound <= 0 {
		return nil
	}
	var out []time.Time
	t := g.start
	for {
		t = t.Add(time.Duration(g.rng.ExpFloat64() / bound * float64(time.Hour)))
		if !t.Before(g.end) {
			return out
		}
		if g.rng.Float64()*bound < g.site.Rate(clockHour(t, g.loc), we) {
			out = append(out, t)
		}
	}
}

// scramble maps a subject number below 10^8 onto an 8-digit ref by a
// keyed four-round Feistel network on two 4-digit halves: a bijection, so
// refs look arbitrary but never collide.
func (g *day) scramble(j uint64) string {
	const half = 10_000
	l, r := j/half%half, j%half
	for round := uint64(1); round <= 4; round++ {
		l, r = r, (l+mix(g.seed^round<<56^r)%half)%half
	}
	return pad(int(l), 4) + pad(int(r), 4)
}

// subject draws the case's subject: from the returning population, or a
// subject new on this day.
func (g *day) subject(n int) string {
	var j uint64
	if g.site.Population > 0 && g.rng.Float64() < g.site.ReturnShare {
		j = uint64(g.rng.IntN(g.site.Population))
	} else {
		j = uint64(g.site.Population) + uint64(g.day)*10_000 + uint64(n)
	}
	return g.site.SubjectPrefix + g.scramble(j)
}

func (g *day) caseRef(n int) string {
	return g.site.CasePrefix + g.start.Format("20060102") + "-" + pad(n, 4)
}

func pad(n, w int) string {
	s := strconv.Itoa(n)
	for len(s) < w {
		s = "0" + s
	}
	return s
}

// staffRef is the pseudonymous ref of server k of step si on this day; the
// roster of each step rotates by day so a server index is not one person.
func (g *day) staffRef(si, k int, act *Activity) string {
	size := slices.Max(act.Staff[:]) + 2
	base := g.siteIdx*3000 + si*1000 + 100 + int(mix(g.seed^uint64(si+1)<<8^uint64(g.siteIdx+1))%700)
	return act.StaffPrefix + "-" + pad(base+(k+g.day)%size, 4)
}

// simulate draws the day's arrivals and passes the cases through the
// site's steps.
func (g *day) simulate() []*visit {
	arr := g.arrivals()
	vs := make([]*visit, len(arr))
	for i, t := range arr {
		v := &visit{n: i + 1, arrive: t}
		v.caseRef = g.caseRef(v.n)
		v.subject = g.subject(v.n)
		v.line = pick(g.rng, g.site.Lines)
		v.channel = pick(g.rng, g.site.Channels)
		v.next = t.Add(g.uniform(g.site.Register))
		vs[i] = v
	}
	for si := range g.site.Steps {
		g.serve(vs, si)
	}
	for _, v := range vs {
		if !v.abandoned {
			if _, ok := g.site.Codes[schema.Departure]; ok {
				v.depart = v.steps[len(v.steps)-1].end.Add(g.uniform(g.site.Leave))
			}
			v.outcome = pick(g.rng, g.site.Outcomes)
		}
	}
	return vs
}

// serve runs one step as a multi-server first-come-first-served queue with
// time-varying staffing and abandonment. Cases are taken in the order they
// join the queue; each goes to the server that can start it soonest. A case
// whose wait would exceed its patience leaves at the end of its patience
// and takes no server time, so it changes nothing for the others: the
// recursion is exact for FCFS with reneging.
func (g *day) serve(vs []*visit, si int) {
	act := &g.site.Steps[si]
	var q []*visit
	for _, v := range vs {
		if !v.abandoned {
			q = append(q, v)
		}
	}
	slices.SortStableFunc(q, func(a, b *visit) int {
		if c := a.next.Compare(b.next); c != 0 {
			return c
		}
		return a.n - b.n
	})
	servers := slices.Max(act.Staff[:])
	free := make([]time.Time, servers)
	for k := range free {
		free[k] = g.start
	}
	horizon := g.start.Add(30 * time.Hour)
	for _, v := range q {
		enq := v.next
		patience := time.Duration(math.MaxInt64)
		if act.Patience > 0 {
			patience = minutes(g.rng.ExpFloat64() * act.Patience)
		}
		best, bk := time.Time{}, -1
		for k := range free {
			c := free[k]
			if c.Before(enq) {
				c = enq
			}
			c, ok := g.onDuty(act, k, c, horizon)
			if ok && (bk < 0 || c.Before(best)) {
				best, bk = c, k
			}
		}
		if bk < 0 || best.Sub(enq) > patience {
			v.abandoned = true
			if patience == time.Duration(math.MaxInt64) {
				v.abandonAt = enq
			} else {
				v.abandonAt = enq.Add(patience)
			}
			v.steps = append(v.steps, served{enq: enq})
			continue
		}
		dur := minutes(math.Exp(act.MeanLog + act.SDLog*g.rng.NormFloat64()))
		s := served{enq: enq, start: best, end: best.Add(dur), staff: g.staffRef(si, bk, act), ok: true}
		free[bk] = s.end
		v.steps = append(v.steps, s)
		if si == 0 {
			v.priority = pick(g.rng, g.site.Priorities)
		}
		v.next = s.end.Add(g.uniform(g.site.Gap))
	}
}

// onDuty returns the first instant at or after c at which server k of the
// step is on duty, or false when none comes before the horizon.
func (g *day) onDuty(act *Activity, k int, c, horizon time.Time) (time.Time, bool) {
	for c.Before(horizon) {
		lt := c.In(g.loc)
		if k < act.Staff[lt.Hour()] {
			return c, true
		}
		into := time.Duration(lt.Minute())*time.Minute + time.Duration(lt.Second())*time.Second + time.Duration(lt.Nanosecond())
		c = c.Add(time.Hour - into)
	}
	return c, false
}
