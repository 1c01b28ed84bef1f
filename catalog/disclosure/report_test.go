package disclosure

import (
	"fmt"
	"math"
	"slices"
	"testing"
)

// The worked example: ten cases, two quasi-identifiers, one sensitive
// attribute. Every figure below is counted by hand from the table.
//
//	class (age, sex)   cases  diagnosis
//	40-44 F            3      A B A
//	40-44 M            2      C C
//	90+   F            1      A
//	45-49 M            4      B B D (missing)
func TestWorkedExample(t *testing.T) {
	rows := [][3]string{
		{"40-44", "F", "A"}, {"40-44", "F", "B"}, {"40-44", "F", "A"},
		{"40-44", "M", "C"}, {"40-44", "M", "C"},
		{"90+", "F", "A"},
		{"45-49", "M", "B"}, {"45-49", "M", "B"}, {"45-49", "M", "D"}, {"45-49", "M", ""},
	}
	a := New(Options{Quasi: []string{"age", "sex"}, Sensitive: []string{"diagnosis"}, K: 3, MaxRisk: 0.5, Dir: t.TempDir()})
	defer a.Close()
	for _, r := range rows {
		if err := a.Add([]string{r[0], r[1]}, []string{r[2]}); err != nil {
			t.Fatal(err)
		}
	}
	r, err := a.Report()
	if err != nil {
		t.Fatal(err)
	}
	if r.Cases != 10 || r.Classes != 4 || r.Anonymity != 1 {
		t.Errorf("cases %d classes %d k %d, want 10, 4, 1", r.Cases, r.Classes, r.Anonymity)
	}
	wantSizes := []SizeCount{{1, 1, 1}, {2, 1, 2}, {3, 1, 3}, {4, 1, 4}}
	if !slices.Equal(r.Sizes, wantSizes) {
		t.Errorf("sizes %v, want %v", r.Sizes, wantSizes)
	}
	// Below k=3: the classes of 1 and 2 cases.
	if r.BelowK != (Below{Classes: 2, Cases: 3, Share: 0.3}) {
		t.Errorf("below k %+v, want 2 classes, 3 cases, 0.3", r.BelowK)
	}
	// Prosecutor risk per case 1/3,1/3,1/3, 1/2,1/2, 1, 1/4 x4: max 1,
	// mean (1+1+1+1)/10 = 0.4.
	if r.Risk.Max != 1 || math.Abs(r.Risk.Mean-0.4) > 1e-12 || r.Risk.CasesAtMax != 1 {
		t.Errorf("risk %+v, want max 1, mean 0.4, 1 case at max", r.Risk)
	}
	// Diagnosis: 2, 1, 1, 2 distinct values per class (missing not
	// counted): l = 1, two homogeneous classes holding 3 cases.
	if want := (Diversity{Attribute: "diagnosis", L: 1, Homogeneous: 2, CasesInThem: 3}); len(r.Diversity) != 1 || r.Diversity[0] != want {
		t.Errorf("diversity %+v, want %+v", r.Diversity, want)
	}
	// Age alone: classes of 5, 1 and 4 cases; sex alone: 4 and 6.
	want := []Combination{
		{Attributes: []string{"age"}, Classes: 3, Smallest: 1, CasesBelowK: 1},
		{Attributes: []string{"sex"}, Classes: 2, Smallest: 4, CasesBelowK: 0},
		{Attributes: []string{"age", "sex"}, Classes: 4, Smallest: 1, CasesBelowK: 3},
	}
	if fmt.Sprint(r.Combinations) != fmt.Sprint(want) {
		t.Errorf("combinations %v, want %v", r.Combinations, want)
	}
	// Age alone already makes a class of one (the 90+ case).
	if r.Driver == nil || !slices.Equal(r.Driver.Attributes, []string{"age"}) {
		t.Errorf("driver %+v, want age", r.Driver)
	}
	if !r.AboveThreshold {
		t.Error("max risk 1 over 0.5 is not above the threshold")
	}
}

// A generated population whose classes have sizes known by construction:
// class c has size c%7+1 and its sensitive attribute min(size, c%3+1)
// distinct values. Run once in memory and once spilling every few keys:
// both must give the figures of the construction.
func TestGeneratedPopulation(t *testing.T) {
	const nClasses = 3000
	for _, mem := range []int{0, 8 << 10} {
		t.Run(fmt.Sprint("memory=", mem), func(t *testing.T) {
			a := New(Options{Quasi: []string{"q1", "q2", "q3"}, Sensitive: []string{"s"}, K: 5, MaxRisk: 0.2, Dir: t.TempDir(), Memory: mem})
			defer a.Close()
			var cases, below, belowClasses, homog, homogCases int64
			sizes := map[int64]int64{}
			minL := int64(math.MaxInt64)
			// Add cases interleaved across classes, as a version's case
			// order would.
			type cls struct{ size, l int }
			cl := make([]cls, nClasses)
			var byLast [10]int64 // cases by the last digit of the class (q3)
			for c := range cl {
				byLast[c%10] += int64(c%7 + 1)
				cl[c] = cls{size: c%7 + 1, l: min(c%7+1, c%3+1)}
				s := int64(cl[c].size)
				cases += s
				sizes[s]++
				if s < 5 {
					below += s
					belowClasses++
				}
				minL = min(minL, int64(cl[c].l))
				if cl[c].l == 1 {
					homog++
					homogCases += s
				}
			}
			for i := range 7 {
				for c := range cl {
					if i >= cl[c].size {
						continue
					}
					q := []string{fmt.Sprint(c / 100), fmt.Sprint(c % 100 / 10), fmt.Sprint(c % 10)}
					if err := a.Add(q, []string{fmt.Sprint("v", i%cl[c].l)}); err != nil {
						t.Fatal(err)
					}
				}
			}
			r, err := a.Report()
			if err != nil {
				t.Fatal(err)
			}
			if mem > 0 && a.subs[len(a.subs)-1].Runs() < 2 {
				t.Errorf("the small memory bound spilled %d runs; want several", a.subs[len(a.subs)-1].Runs())
			}
			if r.Cases != cases || r.Classes != nClasses || r.Anonymity != 1 {
				t.Errorf("cases %d classes %d k %d; want %d, %d, 1", r.Cases, r.Classes, r.Anonymity, cases, nClasses)
			}
			for _, sc := range r.Sizes {
				if sizes[sc.Size] != sc.Classes || sc.Cases != sc.Size*sc.Classes {
					t.Errorf("size %d: %d classes, want %d", sc.Size, sc.Classes, sizes[sc.Size])
				}
			}
			if len(r.Sizes) != 7 {
				t.Errorf("%d sizes, want 7", len(r.Sizes))
			}
			if r.BelowK.Cases != below || r.BelowK.Classes != belowClasses {
				t.Errorf("below k %+v, want %d cases in %d classes", r.BelowK, below, belowClasses)
			}
			if got, want := r.Risk.Mean, float64(nClasses)/float64(cases); math.Abs(got-want) > 1e-12 {
				t.Errorf("mean risk %v, want %v", got, want)
			}
			if d := r.Diversity[0]; d.L != minL || d.Homogeneous != homog || d.CasesInThem != homogCases {
				t.Errorf("diversity %+v, want l %d, %d homogeneous classes of %d cases", d, minL, homog, homogCases)
			}
			// q3 alone has 10 classes, of the cases of 300 classes each.
			for _, c := range r.Combinations {
				if slices.Equal(c.Attributes, []string{"q3"}) && (c.Classes != 10 || c.Smallest != slices.Min(byLast[:])) {
					t.Errorf("q3 alone: %+v, want 10 classes, the smallest of %d", c, slices.Min(byLast[:]))
				}
			}
			if r.Driver == nil || len(r.Driver.Attributes) != 3 {
				t.Errorf("driver %+v; want all three (no fewer make a class of one)", r.Driver)
			}
			small, err := a.SmallClasses(nClasses)
			if err != nil || int64(len(small)) != belowClasses {
				t.Errorf("small classes: %d, %v; want %d", len(small), err, belowClasses)
			}
			if _, err := a.SmallClasses(10); err == nil {
				t.Error("more small classes than the limit gave no error")
			}
		})
	}
}

// TestEventSets: an event-level sensitive attribute, each case carrying a
// set of values, listed after the case-level one and marked by its level.
// Counted by hand:
//
//	class  case  outcome  codes (event-level)
//	F      1     x        {A, B}
//	F      2     x        {A}
//	M      3     y        {}
//	M      4     z        {C}
//
// codes: F has {A, B} (l 2), M has {C} (l 1, one case with a value);
// outcome: F {x} homogeneous (2 cases), M {y, z}.
func TestEventSets(t *testing.T) {
	a := New(Options{Quasi: []string{"sex"}, Sensitive: []string{"outcome"}, EventSensitive: []string{"codes"}, K: 2, MaxRisk: 1, Dir: t.TempDir()})
	defer a.Close()
	for _, c := range []struct {
		sex, outcome string
		codes        []string
	}{{"F", "x", []string{"A", "B"}}, {"F", "x", []string{"A"}}, {"M", "y", nil}, {"M", "z", []string{"C"}}} {
		if err := a.AddCase([]string{c.sex}, []string{c.outcome}, [][]string{c.codes}); err != nil {
			t.Fatal(err)
		}
	}
	if err := a.AddCase([]string{"F"}, []string{"x"}, [][]string{nil, nil}); err == nil {
		t.Error("two value sets for one event-level attribute were taken")
	}
	r, err := a.Report()
	if err != nil {
		t.Fatal(err)
	}
	want := []Diversity{
		{Attribute: "outcome", L: 1, Homogeneous: 1, CasesInThem: 2},
		{Attribute: "codes", L: 1, Homogeneous: 1, CasesInThem: 1, Level: "event"},
	}
	if !slices.Equal(r.Diversity, want) || !slices.Equal(r.EventSensitive, []string{"codes"}) || !slices.Equal(r.Sensitive, []string{"outcome"}) {
		t.Errorf("diversity %+v, sensitive %v, event-level %v; want %+v", r.Diversity, r.Sensitive, r.EventSensitive, want)
	}
}
