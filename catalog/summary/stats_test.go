package summary

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// rChecks mirrors testdata/r-check-values.json (R 4.2.2, survival 3.5.3;
// see testdata/README.md for the exact R calls).
type rKM struct {
	Source     string    `json:"source"`
	Median     float64   `json:"median"`
	DataTime   []float64 `json:"data_time"`
	DataStatus []int     `json:"data_status"`
	DataEvent  []int     `json:"data_event"`
	Time       []float64 `json:"time"`
	NRisk      []uint64  `json:"n_risk"`
	NEvent     []uint64  `json:"n_event"`
	NCensor    []uint64  `json:"n_censor"`
	Survival   []float64 `json:"survival"`
	StdErrLog  []float64 `json:"std_err_log"`
	Lower      []float64 `json:"lower_95_log"`
	Upper      []float64 `json:"upper_95_log"`
}

func (k *rKM) events() []bool {
	st := k.DataStatus
	if st == nil {
		st = k.DataEvent
	}
	out := make([]bool, len(st))
	for i, s := range st {
		out[i] = s == 1
	}
	return out
}

type rChecks struct {
	AML    rKM `json:"kaplan_meier_aml"`
	Lung   rKM `json:"kaplan_meier_lung"`
	Rivers struct {
		Data    []float64 `json:"data"`
		MeanLog float64   `json:"meanlog"`
		SDLog   float64   `json:"sdlog"`
		KSD     float64   `json:"ks_D"`
		Q7      struct {
			P     []float64 `json:"p"`
			Value []float64 `json:"value"`
		} `json:"quantile_type7"`
	} `json:"lognormal_rivers"`
	Poisson struct {
		Cases []struct {
			K     uint64  `json:"k"`
			Lower float64 `json:"lower"`
			Upper float64 `json:"upper"`
		} `json:"cases"`
	} `json:"poisson_exact_ci_95"`
}

func loadR(t *testing.T) *rChecks {
	t.Helper()
	b, err := os.ReadFile("testdata/r-check-values.json")
	if err != nil {
		t.Fatal(err)
	}
	var r rChecks
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	if len(r.Lung.DataEvent) != 228 {
		t.Fatalf("lung data has %d subjects", len(r.Lung.DataEvent))
	}
	return &r
}

func relClose(got, want, tol float64) bool {
	if want == 0 {
		return math.Abs(got) <= tol
	}
	return math.Abs(got-want) <= tol*math.Abs(want)
}

// checkKM compares a curve with R's survfit output, to 1e-9 relative.
func checkKM(t *testing.T, name string, got KMCurve, want *rKM, scale float64) {
	t.Helper()
	if len(got.Steps) != len(want.Time) {
		t.Fatalf("%s: %d steps, R has %d", name, len(got.Steps), len(want.Time))
	}
	const tol = 1e-9
	for i, s := range got.Steps {
		if s.Time != want.Time[i]*scale || s.AtRisk != want.NRisk[i] || s.Events != want.NEvent[i] || s.Censored != want.NCensor[i] {
			t.Errorf("%s step %d: time %v risk %d events %d censored %d; R (%s): %v %d %d %d", name, i,
				s.Time, s.AtRisk, s.Events, s.Censored, want.Source, want.Time[i], want.NRisk[i], want.NEvent[i], want.NCensor[i])
		}
		// R 4.2.2, survival 3.5.3: survfit(..., conf.type = "log") $surv, $std.err, $lower, $upper.
		for _, c := range []struct {
			what      string
			got, want float64
		}{
			{"survival", s.Survival, want.Survival[i]},
			{"std_err", float64(s.StdErr), want.StdErrLog[i]},
			{"lower", float64(s.Lower), want.Lower[i]},
			{"upper", float64(s.Upper), want.Upper[i]},
		} {
			if !relClose(c.got, c.want, tol) {
				t.Errorf("%s step %d (time %v): %s %.15g, R %.15g", name, i, want.Time[i], c.what, c.got, c.want)
			}
		}
	}
	// R: print(survfit(...)) median.
	if float64(got.Median) != want.Median*scale {
		t.Errorf("%s: median %v, R %v", name, got.Median, want.Median*scale)
	}
}

func TestKaplanMeierAgainstR(t *testing.T) {
	r := loadR(t)
	for _, c := range []struct {
		name string
		km   *rKM
	}{{"aml", &r.AML}, {"lung", &r.Lung}} {
		got, err := KaplanMeier(c.km.DataTime, c.km.events())
		if err != nil {
			t.Fatal(err)
		}
		checkKM(t, c.name, got, c.km, 1)
	}
	if _, err := KaplanMeier([]float64{1}, nil); err != ErrLength {
		t.Errorf("mismatched lengths: %v", err)
	}
}

// TestKaplanMeierThroughAccumulator feeds aml and lung as waits in a
// queue: an abandon where R's status is an event, a start (served,
// censored at its wait) otherwise; the patience curve must be R's.
func TestKaplanMeierThroughAccumulator(t *testing.T) {
	r := loadR(t)
	for _, c := range []struct {
		name string
		km   *rKM
	}{{"aml", &r.AML}, {"lung", &r.Lung}} {
		base := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
		var evs []schema.Event
		for i, x := range c.km.DataTime {
			id := fmt.Sprintf("case-%d", i)
			at := base.Add(time.Duration(i) * time.Minute)
			evs = append(evs, schema.Event{Site: "s", CaseID: id, Type: schema.Arrival, Queue: "q", OccurredAt: at})
			end := at.Add(time.Duration(x) * time.Second)
			if c.km.events()[i] {
				evs = append(evs, schema.Event{Site: "s", CaseID: id, Type: schema.Abandon, Queue: "q", OccurredAt: end})
			} else {
				evs = append(evs, schema.Event{Site: "s", CaseID: id, Type: schema.Start, Queue: "q", OccurredAt: end})
			}
		}
		slices.SortStableFunc(evs, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
		a := New(Options{})
		a.ObserveAll(evs)
		s := a.Summary()
		if len(s.Queues) != 1 || s.Queues[0].Patience == nil {
			t.Fatalf("%s: queues %+v", c.name, s.Queues)
		}
		checkKM(t, c.name+" via Accumulator", *s.Queues[0].Patience, c.km, 1)
		var ev uint64
		for _, e := range c.km.events() {
			if e {
				ev++
			}
		}
		q := s.Queues[0]
		if q.Wait.Abandoned != ev || q.Wait.N != uint64(len(c.km.DataTime))-ev {
			t.Errorf("%s: abandoned %d served %d", c.name, q.Wait.Abandoned, q.Wait.N)
		}
	}
}

func TestLognormalAgainstR(t *testing.T) {
	r := loadR(t).Rivers
	mu, sd, err := LognormalFit(r.Data)
	if err != nil {
		t.Fatal(err)
	}
	// R 4.2.2: mean(log(rivers)), sqrt(mean((log(rivers)-meanlog)^2)).
	if !relClose(mu, r.MeanLog, 1e-12) || !relClose(sd, r.SDLog, 1e-12) {
		t.Errorf("fit %.15g %.15g, R %.15g %.15g", mu, sd, r.MeanLog, r.SDLog)
	}
	// R 4.2.2: ks.test(rivers, "plnorm", meanlog, sdlog)$statistic.
	d := KSDistance(r.Data, func(x float64) float64 { return LognormalCDF(x, mu, sd) })
	if !relClose(d, r.KSD, 1e-12) {
		t.Errorf("KS %.15g, R %.15g", d, r.KSD)
	}
	s := slices.Sorted(slices.Values(r.Data))
	for i, p := range r.Q7.P {
		// R 4.2.2: quantile(rivers, p, type = 7).
		if got := Quantile7(s, p); got != r.Q7.Value[i] {
			t.Errorf("Quantile7(%v) = %v, R %v", p, got, r.Q7.Value[i])
		}
	}
	// The same through a distribution: exact values, so equal fits.
	dd := newDist()
	for _, x := range r.Data {
		dd.add(int64(x*usPerSec), DefaultExactValues)
	}
	ln := lognormalOf(dd)
	if !relClose(ln.MeanLog, r.MeanLog, 1e-12) || !relClose(ln.SDLog, r.SDLog, 1e-12) || !relClose(ln.KS, r.KSD, 1e-12) {
		t.Errorf("dist fit %+v", ln)
	}
	du := durationsOf(dd)
	if du.P50 != 425 || du.P90 != 1054 || du.P95 != 1450 {
		t.Errorf("dist quantiles %+v", du)
	}
	if _, _, err := LognormalFit([]float64{1, 0}); err != ErrNonPositive {
		t.Errorf("zero value: %v", err)
	}
	if _, _, err := LognormalFit(nil); err != ErrEmpty {
		t.Errorf("empty: %v", err)
	}
}

func TestQuantile7(t *testing.T) {
	// Hyndman & Fan (1996) definition 7, worked by hand: h = (n-1)p.
	for _, c := range []struct {
		xs   []float64
		p    float64
		want float64
	}{
		{[]float64{1, 2, 3, 4}, 0.5, 2.5}, // h = 1.5
		{[]float64{1, 2, 3, 4}, 0.9, 3.7}, // h = 2.7
		{[]float64{1, 2, 3, 4}, 0, 1},     // h = 0
		{[]float64{1, 2, 3, 4}, 1, 4},     // h = 3
		{[]float64{10}, 0.3, 10},          // one value
		{[]float64{1, 1, 1, 5}, 0.75, 2},  // h = 2.25: 1 + .25*4
	} {
		got := Quantile7(c.xs, c.p)
		if math.Abs(got-c.want) > 1e-12 {
			t.Errorf("Quantile7(%v, %v) = %v, want %v", c.xs, c.p, got, c.want)
		}
		var pts []valueCount
		for _, x := range c.xs {
			if len(pts) > 0 && pts[len(pts)-1].v == x {
				pts[len(pts)-1].c++
			} else {
				pts = append(pts, valueCount{x, 1})
			}
		}
		if g := quantile7Counts(pts, uint64(len(c.xs)), c.p); math.Abs(g-c.want) > 1e-12 {
			t.Errorf("counts form %v, want %v", g, c.want)
		}
	}
	if !math.IsNaN(Quantile7(nil, 0.5)) {
		t.Error("empty not NaN")
	}
}

func TestPoissonExactCIAgainstR(t *testing.T) {
	for _, c := range loadR(t).Poisson.Cases {
		lo, hi := PoissonExactCI(c.K, 0.95)
		// R 4.2.2: poisson.test(k, T = 1)$conf.int.
		if !relClose(lo, c.Lower, 1e-9) || !relClose(hi, c.Upper, 1e-9) {
			t.Errorf("k=%d: [%.15g, %.15g], R [%.15g, %.15g]", c.K, lo, hi, c.Lower, c.Upper)
		}
	}
}

func TestNumJSON(t *testing.T) {
	b, err := json.Marshal([]Num{1.5, Num(math.NaN()), Num(math.Inf(1))})
	if err != nil || string(b) != "[1.5,null,null]" {
		t.Fatalf("%s %v", b, err)
	}
	var back []Num
	if err := json.Unmarshal(b, &back); err != nil || back[0] != 1.5 || !math.IsNaN(float64(back[1])) {
		t.Fatalf("%v %v", back, err)
	}
}

// TestLognormalExactBeyondSketch: the lognormal fit of more distinct
// values than ExactValues (the distribution has collapsed to its sketch)
// is still the maximum-likelihood fit of the values themselves.
func TestLognormalExactBeyondSketch(t *testing.T) {
	d := newDist()
	var xs []float64
	for i := range 20000 {
		us := int64(1e6 + (i*7919)%20000*1013 + i) // distinct, 1 s to about 21 s
		d.add(us, DefaultExactValues)
		xs = append(xs, float64(us)/usPerSec)
	}
	if d.exact != nil {
		t.Fatal("the distribution did not collapse")
	}
	mu, sd, err := LognormalFit(xs)
	if err != nil {
		t.Fatal(err)
	}
	got := lognormalOf(d)
	if got.N != 20000 || math.Abs(got.MeanLog-mu) > 1e-11 || math.Abs(got.SDLog-sd) > 1e-11 {
		t.Errorf("fit %+v, want meanlog %.15f sdlog %.15f (MLE of the values)", got, mu, sd)
	}
}
