package summary

import (
	"container/heap"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// customer is one simulated case, times in µs since the start.
type customer struct{ arrive, start, end int64 }

// simulateMMc runs a first-come-first-served M/M/c queue (seeded) for n
// customers, mean interarrival 1/lambda and mean service 1/mu seconds.
func simulateMMc(seed uint64, n, c int, lambda, mu float64) []customer {
	r := rand.New(rand.NewPCG(seed, 1))
	free := &int64Heap{}
	for range c {
		heap.Push(free, int64(0))
	}
	out := make([]customer, n)
	var t int64
	for i := range out {
		t += int64(r.ExpFloat64() / lambda * 1e6)
		f := heap.Pop(free).(int64)
		st := max(t, f)
		end := st + int64(r.ExpFloat64()/mu*1e6) + 1
		heap.Push(free, end)
		out[i] = customer{t, st, end}
	}
	return out
}

type int64Heap []int64

func (h int64Heap) Len() int           { return len(h) }
func (h int64Heap) Less(i, j int) bool { return h[i] < h[j] }
func (h int64Heap) Swap(i, j int)      { h[i], h[j] = h[j], h[i] }
func (h *int64Heap) Push(x any)        { *h = append(*h, x.(int64)) }
func (h *int64Heap) Pop() any {
	old := *h
	x := old[len(old)-1]
	*h = old[:len(old)-1]
	return x
}

// observeCustomers feeds arrival, start, complete and departure events of
// cs, in time order, to a; case ids are prefix + index.
func observeCustomers(a *Accumulator, base time.Time, prefix string, cs []customer) {
	type ev struct {
		at   int64
		i    int32
		kind uint8
	}
	evs := make([]ev, 0, 4*len(cs))
	for i, c := range cs {
		evs = append(evs, ev{c.arrive, int32(i), 0}, ev{c.start, int32(i), 1}, ev{c.end, int32(i), 2}, ev{c.end, int32(i), 3})
	}
	slices.SortStableFunc(evs, func(x, y ev) int {
		switch {
		case x.at < y.at:
			return -1
		case x.at > y.at:
			return 1
		}
		return 0
	})
	kinds := [4]schema.EventType{schema.Arrival, schema.Start, schema.Complete, schema.Departure}
	var e schema.Event
	out := make([]schema.Event, 0, len(evs))
	for _, x := range evs {
		e = schema.Event{Site: "sim", CaseID: prefix + strconv.Itoa(int(x.i)), Type: kinds[x.kind],
			OccurredAt: base.Add(time.Duration(x.at) * time.Microsecond)}
		if x.kind <= 1 {
			e.Queue = "q"
		}
		if x.kind == 1 || x.kind == 2 {
			e.Activity = "service"
		}
		out = append(out, e)
	}
	a.ObserveAll(out)
}

// batchMean returns the mean of xs and the standard error of that mean by
// the method of batch means (k batches of consecutive values), which
// accounts for the strong serial correlation of queue waits.
func batchMean(xs []float64, k int) (mean, se float64) {
	m := len(xs) / k
	bm := make([]float64, k)
	for b := range k {
		s := 0.0
		for _, x := range xs[b*m : (b+1)*m] {
			s += x
		}
		bm[b] = s / float64(m)
	}
	for _, x := range xs {
		mean += x
	}
	mean /= float64(len(xs))
	g := 0.0
	for _, x := range bm {
		g += x
	}
	g /= float64(k)
	v := 0.0
	for _, x := range bm {
		v += (x - g) * (x - g)
	}
	return mean, math.Sqrt(v / float64(k-1) / float64(k))
}

// erlangC is the probability that an arrival waits in an M/M/c queue with
// offered load a = lambda/mu erlangs: Gross & Harris, Fundamentals of
// Queueing Theory, M/M/c section (from memory):
// C(c,a) = [a^c/c! · c/(c-a)] / [Σ_{k<c} a^k/k! + a^c/c! · c/(c-a)].
func erlangC(c int, a float64) float64 {
	sum, term := 0.0, 1.0
	for k := range c {
		if k > 0 {
			term *= a / float64(k)
		}
		sum += term
	}
	top := term * a / float64(c) * float64(c) / (float64(c) - a)
	return top / (sum + top)
}

func TestQueuesAgainstClosedForms(t *testing.T) {
	const n = 200_000
	mu := 1.0 / 60 // mean service 60 s
	for _, c := range []struct {
		name    string
		servers int
		seed    uint64
	}{{"M/M/1", 1, 7}, {"M/M/3", 3, 11}} {
		t.Run(c.name, func(t *testing.T) {
			lambda := 0.8 * float64(c.servers) * mu // utilisation 0.8
			a := lambda / mu
			var wq, pw float64
			if c.servers == 1 {
				// Gross & Harris, M/M/1 (from memory): Wq = ρ/(μ-λ), L = ρ/(1-ρ), P(wait) = ρ.
				rho := lambda / mu
				wq, pw = rho/(mu-lambda), rho
			} else {
				// Gross & Harris, M/M/c (from memory): Wq = C(c,a)/(cμ-λ).
				pw = erlangC(c.servers, a)
				wq = pw / (float64(c.servers)*mu - lambda)
			}
			l := lambda * (wq + 1/mu) // Little: L = λW, W = Wq + 1/μ
			if c.servers == 1 && math.Abs(l-4) > 1e-9 {
				t.Fatalf("M/M/1 L = %v, want ρ/(1-ρ) = 4", l)
			}
			cs := simulateMMc(c.seed, n, c.servers, lambda, mu)
			base := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
			acc := New(Options{})
			observeCustomers(acc, base, "c", cs)
			s := acc.Summary()
			if len(s.Queues) != 1 || len(s.Activities) != 1 {
				t.Fatalf("groups %d %d", len(s.Queues), len(s.Activities))
			}
			q := s.Queues[0]

			waits, waited, stays := make([]float64, n), make([]float64, n), make([]float64, n)
			for i, x := range cs {
				waits[i] = float64(x.start-x.arrive) / 1e6
				if x.start > x.arrive {
					waited[i] = 1
				}
				stays[i] = float64(x.end-x.arrive) / 1e6
			}
			// The summary must reproduce the simulation's own statistics.
			mw, seW := batchMean(waits, 50)
			mp, seP := batchMean(waited, 50)
			ms, seS := batchMean(stays, 50)
			if q.Wait.N != n || !relClose(q.Wait.Mean, mw, 1e-9) || !relClose(q.Wait.WaitedShare, mp, 1e-12) {
				t.Errorf("wait n %d mean %v waited %v; simulation %v %v", q.Wait.N, q.Wait.Mean, q.Wait.WaitedShare, mw, mp)
			}
			if !relClose(s.LengthOfStay.Mean, ms, 1e-9) {
				t.Errorf("stay mean %v, simulation %v", s.LengthOfStay.Mean, ms)
			}
			// Against the closed forms: within 4 batch-means standard errors
			// (plus 0.5% for the start-empty transient), a two-sided check that
			// a correct summary fails with probability about 6e-5.
			check := func(what string, got, want, se float64) {
				t.Helper()
				if tol := 4*se + 0.005*want; math.Abs(got-want) > tol {
					t.Errorf("%s %.4f, closed form %.4f (tolerance %.4f)", what, got, want, tol)
				} else {
					t.Logf("%s %.4f, closed form %.4f (tolerance %.4f)", what, got, want, tol)
				}
			}
			check("mean wait Wq", q.Wait.Mean, wq, seW)
			check("P(wait > 0)", q.Wait.WaitedShare, pw, seP)
			// L = area/T = (n/T)·W̄: its relative error is that of W̄ and of
			// the arrival count (1/√n).
			li := s.Occupancy.Little
			check("L", li.L, l, l*math.Hypot(seS/ms, 1/math.Sqrt(n)))
			if math.Abs(li.Ratio-1) > 1e-12 {
				t.Errorf("Little ratio %v", li.Ratio)
			}
			// Mean service, mean offered load over the week (erlangs = λ/μ);
			// 3% covers partial first and last days counted as whole ones.
			sv := s.Activities[0].Service
			check("mean service", sv.Mean, 1/mu, sv.SD/math.Sqrt(n))
			var load float64
			for _, x := range q.OfferedLoad {
				load += x
			}
			load /= 168
			if math.Abs(load-a) > 0.03*a {
				t.Errorf("mean offered load %.3f, want a = %.3f erlangs", load, a)
			}
			// Service times are exponential: a lognormal fits badly, and its
			// KS distance shows it; the fit itself must be finite.
			if ln := s.Activities[0].Lognormal; ln == nil || ln.KS < 0.05 || math.IsNaN(ln.MeanLog) {
				t.Errorf("lognormal %+v", ln)
			}
			// Quantiles come from the sketch here (distinct µs waits exceed the
			// cap): within its stated relative error of the simulation's own
			// type-7 quantiles.
			sorted := slices.Sorted(slices.Values(waits))
			for _, x := range []struct {
				p, got float64
			}{{0.5, q.Wait.P50}, {0.9, q.Wait.P90}, {0.95, q.Wait.P95}, {0.99, q.Wait.P99}} {
				if want := Quantile7(sorted, x.p); q.Wait.Exact || math.Abs(x.got-want) > q.Wait.RelError*want+1e-6 {
					t.Errorf("p%v wait %v, simulation %v (rel error %v)", 100*x.p, x.got, want, q.Wait.RelError)
				}
			}
			if c.servers == 1 {
				// Gross & Harris, M/M/1 (from memory): P(Wq > t) = ρ·exp(-(μ-λ)t).
				over := make([]float64, n)
				for i, w := range waits {
					if w > 900 {
						over[i] = 1
					}
				}
				_, se := batchMean(over, 50)
				check("P(wait > 15 min)", q.Wait.Over[0].Share, pw*math.Exp(-(mu-lambda)*900), se)
			}
		})
	}
}
