package summary

import (
	"errors"
	"math"
	"slices"
	"strconv"

	"gonum.org/v1/gonum/stat/distuv"
)

// Sentinel errors of the statistics.
var (
	ErrEmpty       = errors.New("no data")                     // a statistic needs at least one value
	ErrNonPositive = errors.New("non-positive value")          // a lognormal fit needs values > 0
	ErrLength      = errors.New("slices of different lengths") // paired inputs differ in length
)

// Num is a float64 that encodes as JSON null when it is not finite (NaN or
// ±Inf), for statistics that can be undefined, such as the Greenwood error
// of a survival curve that has reached zero. null decodes as NaN.
type Num float64

// MarshalJSON implements json.Marshaler.
func (x Num) MarshalJSON() ([]byte, error) {
	f := float64(x)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, f, 'g', -1, 64), nil
}

// UnmarshalJSON implements json.Unmarshaler.
func (x *Num) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*x = Num(math.NaN())
		return nil
	}
	f, err := strconv.ParseFloat(string(b), 64)
	if err != nil {
		return err
	}
	*x = Num(f)
	return nil
}

// Quantile7 returns the p-quantile (0 <= p <= 1) of sorted, which must be
// in ascending order, by definition 7 of Hyndman and Fan (1996): with
// h = (n-1)p, the value sorted[⌊h⌋] + (h-⌊h⌋)(sorted[⌊h⌋+1]-sorted[⌊h⌋]).
// It is NaN for an empty slice.
func Quantile7(sorted []float64, p float64) float64 {
	n := len(sorted)
	if n == 0 {
		return math.NaN()
	}
	h := float64(n-1) * p
	lo := int(math.Floor(h))
	lo = max(0, min(lo, n-1))
	if lo+1 >= n {
		return sorted[n-1]
	}
	return sorted[lo] + (h-float64(lo))*(sorted[lo+1]-sorted[lo])
}

// valueCount is a distinct value (seconds) and how often it occurs.
type valueCount struct {
	v float64
	c uint64
}

// quantile7Counts is Quantile7 over the multiset given by ascending
// distinct values and their counts, of total n.
func quantile7Counts(pts []valueCount, n uint64, p float64) float64 {
	if n == 0 {
		return math.NaN()
	}
	h := float64(n-1) * p
	lo := uint64(math.Floor(h))
	lo = min(lo, n-1)
	frac := h - float64(lo)
	at := func(rank uint64) float64 { // 0-based rank
		var cum uint64
		for _, q := range pts {
			cum += q.c
			if rank < cum {
				return q.v
			}
		}
		return pts[len(pts)-1].v
	}
	x := at(lo)
	if frac == 0 || lo+1 >= n {
		return x
	}
	return x + frac*(at(lo+1)-x)
}

// KMStep is one distinct time of a Kaplan-Meier curve: the survival just
// after Time, with its Greenwood standard error of log survival and
// log-scale confidence bounds.
type KMStep struct {
	Time     float64 `json:"time"`     // seconds, for curves of the summary
	AtRisk   uint64  `json:"at_risk"`  // cases with time >= Time
	Events   uint64  `json:"events"`   // events (abandonments) at Time
	Censored uint64  `json:"censored"` // censored cases (served) at Time
	Survival float64 `json:"survival"` // product over times <= Time of (1 - events/at_risk)
	StdErr   Num     `json:"std_err"`  // Greenwood: sqrt(sum events/(at_risk (at_risk-events))), of log survival
	Lower    Num     `json:"lower"`    // Survival * exp(-z StdErr)
	Upper    Num     `json:"upper"`    // min(1, Survival * exp(z StdErr))
}

// KMCurve is a Kaplan-Meier estimate.
type KMCurve struct {
	Steps  []KMStep `json:"steps"`
	Median Num      `json:"median"` // first time with Survival <= 0.5 (midpoint of a flat 0.5 stretch); null if never
}

// z975 is the 0.975 quantile of the standard normal distribution.
const z975 = 1.959963984540054

// KaplanMeier estimates the survival function of times, where event[i]
// tells whether time i ended in the event (true) or was censored (false),
// with Greenwood standard errors and log-scale 95% bounds (Kaplan and
// Meier 1958). At a time with both, events come before censorings. It
// fails with ErrLength if the slices differ in length.
func KaplanMeier(times []float64, event []bool) (KMCurve, error) {
	if len(times) != len(event) {
		return KMCurve{}, ErrLength
	}
	idx := make([]int, len(times))
	for i := range idx {
		idx[i] = i
	}
	slices.SortFunc(idx, func(a, b int) int { return cmpFloat(times[a], times[b]) })
	var ts []float64
	var d, c []uint64
	for _, i := range idx {
		if len(ts) == 0 || ts[len(ts)-1] != times[i] {
			ts, d, c = append(ts, times[i]), append(d, 0), append(c, 0)
		}
		if event[i] {
			d[len(d)-1]++
		} else {
			c[len(c)-1]++
		}
	}
	return KaplanMeierCounts(ts, d, c)
}

func cmpFloat(a, b float64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// KaplanMeierCounts is [KaplanMeier] over distinct ascending times with the
// number of events and of censorings at each.
func KaplanMeierCounts(times []float64, events, censored []uint64) (KMCurve, error) {
	if len(times) != len(events) || len(times) != len(censored) {
		return KMCurve{}, ErrLength
	}
	var n uint64
	for i := range times {
		n += events[i] + censored[i]
	}
	out := KMCurve{Steps: make([]KMStep, 0, len(times)), Median: Num(math.NaN())}
	s, g := 1.0, 0.0
	for i, t := range times {
		d := events[i]
		if d > 0 {
			s *= 1 - float64(d)/float64(n)
			if d < n {
				g += float64(d) / (float64(n) * float64(n-d))
			} else {
				g = math.Inf(1)
			}
		}
		se := math.Sqrt(g)
		lo, hi := GreenwoodLogCI(s, se, z975)
		out.Steps = append(out.Steps, KMStep{Time: t, AtRisk: n, Events: d, Censored: censored[i],
			Survival: s, StdErr: Num(se), Lower: Num(lo), Upper: Num(hi)})
		n -= d + censored[i]
	}
	out.Median = Num(kmMedian(out.Steps))
	return out, nil
}

// GreenwoodLogCI returns the log-scale confidence bounds of a survival
// estimate s with standard error seLog of log s: s·exp(∓z·seLog), the upper
// bound capped at 1. Both are NaN when s is zero or seLog is not finite.
func GreenwoodLogCI(s, seLog, z float64) (lower, upper float64) {
	if s <= 0 || math.IsInf(seLog, 0) || math.IsNaN(seLog) {
		return math.NaN(), math.NaN()
	}
	return s * math.Exp(-z*seLog), math.Min(1, s*math.Exp(z*seLog))
}

// kmMedian is the first time at which survival drops to 0.5 or below; if
// it is exactly 0.5 there, the midpoint between that time and the next
// time the curve drops.
func kmMedian(st []KMStep) float64 {
	for i, x := range st {
		if x.Survival < 0.5-1e-12 {
			return x.Time
		}
		if math.Abs(x.Survival-0.5) <= 1e-12 {
			for _, y := range st[i+1:] {
				if y.Events > 0 {
					return (x.Time + y.Time) / 2
				}
			}
			return x.Time
		}
	}
	return math.NaN()
}

// LognormalFit returns the maximum-likelihood lognormal parameters of xs:
// meanlog, the mean of log x, and sdlog, the root mean square deviation of
// log x from it (n in the denominator). It fails with ErrEmpty for no
// values and ErrNonPositive if any value is <= 0.
func LognormalFit(xs []float64) (meanlog, sdlog float64, err error) {
	if len(xs) == 0 {
		return 0, 0, ErrEmpty
	}
	var s float64
	for _, x := range xs {
		if !(x > 0) {
			return 0, 0, ErrNonPositive
		}
		s += math.Log(x)
	}
	meanlog = s / float64(len(xs))
	var q float64
	for _, x := range xs {
		d := math.Log(x) - meanlog
		q += d * d
	}
	return meanlog, math.Sqrt(q / float64(len(xs))), nil
}

// LognormalCDF is the distribution function at x of the lognormal with
// parameters meanlog and sdlog.
func LognormalCDF(x, meanlog, sdlog float64) float64 {
	if x <= 0 {
		return 0
	}
	return 0.5 * math.Erfc(-(math.Log(x)-meanlog)/(sdlog*math.Sqrt2))
}

// KSDistance is the Kolmogorov-Smirnov statistic of xs against the
// continuous distribution function cdf: the largest distance between cdf
// and the empirical distribution function, taken on both sides of each
// step. It is NaN for no values.
func KSDistance(xs []float64, cdf func(float64) float64) float64 {
	s := slices.Clone(xs)
	slices.Sort(s)
	pts := make([]valueCount, 0, len(s))
	for _, x := range s {
		if len(pts) > 0 && pts[len(pts)-1].v == x {
			pts[len(pts)-1].c++
			continue
		}
		pts = append(pts, valueCount{x, 1})
	}
	return ksCounts(pts, uint64(len(s)), cdf)
}

func ksCounts(pts []valueCount, n uint64, cdf func(float64) float64) float64 {
	if n == 0 {
		return math.NaN()
	}
	var cum uint64
	d := 0.0
	for _, p := range pts {
		f := cdf(p.v)
		below := float64(cum) / float64(n)
		cum += p.c
		at := float64(cum) / float64(n)
		d = math.Max(d, math.Max(math.Abs(f-below), math.Abs(at-f)))
	}
	return d
}

// PoissonExactCI is the exact (Garwood 1936) two-sided confidence interval
// at the given level (0.95 for 95%) for the mean of a Poisson count k
// observed over exposure 1: lower = χ²(α/2; 2k)/2 (0 when k = 0) and
// upper = χ²(1-α/2; 2k+2)/2, with α = 1 - level.
func PoissonExactCI(k uint64, level float64) (lower, upper float64) {
	a := 1 - level
	if k > 0 {
		lower = distuv.ChiSquared{K: float64(2 * k)}.Quantile(a/2) / 2
	}
	upper = distuv.ChiSquared{K: float64(2*k + 2)}.Quantile(1-a/2) / 2
	return lower, upper
}
