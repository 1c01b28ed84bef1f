package disclosure

import (
	"errors"
	"fmt"
	"math/bits"
	"slices"
	"strings"
)

// Options configure an Analyzer.
type Options struct {
	Quasi     []string // names of the quasi-identifiers, in the order values are given
	Sensitive []string // names of the sensitive attributes, in the order values are given
	// EventSensitive names the event-level sensitive attributes, in the
	// order AddCase takes their value sets: a case carries a set of values
	// (the distinct ones its events carry), not one.
	EventSensitive []string
	K              int     // the project's k: classes smaller than K are "below k"
	MaxRisk        float64 // the project's threshold on the maximum prosecutor risk
	Dir            string  // where class counts spill
	Memory         int     // bytes of class keys held in memory, over all counters (default 64 MiB)
}

// DefaultMemory is the memory bound of an Analyzer's counters.
const DefaultMemory = 64 << 20

// maxFullSearch is the number of quasi-identifiers up to which every
// combination of them is measured; with more, single attributes and all
// but one are.
const maxFullSearch = 6

// Report is the disclosure report of a set of cases (one version): how
// well its quasi-identifiers hide each case among others.
type Report struct {
	Cases     int64    `json:"cases"`
	K         int      `json:"k"`        // the project's k
	MaxRisk   float64  `json:"max_risk"` // the project's threshold
	Quasi     []string `json:"quasi_identifiers"`
	Sensitive []string `json:"sensitive"`
	// EventSensitive names the event-level sensitive attributes; absent
	// when there are none.
	EventSensitive []string `json:"event_sensitive,omitempty"`
	// Classes is the number of equivalence classes: sets of cases equal on
	// every quasi-identifier (a missing value is a value of its own).
	Classes int64 `json:"classes"`
	// Anonymity is the size of the smallest class: the version is
	// k-anonymous for every k up to it (Sweeney 2002). 0 without cases.
	Anonymity int64       `json:"k_anonymity"`
	Sizes     []SizeCount `json:"class_sizes"` // the distribution of class sizes, by size
	BelowK    Below       `json:"below_k"`
	Risk      Risk        `json:"prosecutor_risk"`
	Diversity []Diversity `json:"l_diversity"`
	// Combinations are the k-anonymity of subsets of the
	// quasi-identifiers; Driver is the smallest subset that alone makes
	// classes as small as all of them do.
	Combinations []Combination `json:"combinations"`
	Driver       *Combination  `json:"driver,omitempty"`
	// AboveThreshold says the maximum prosecutor risk exceeds MaxRisk:
	// the version cannot be published without a recorded override.
	AboveThreshold bool `json:"above_threshold"`
	// Suppressed counts the cases whose quasi-identifiers were suppressed
	// (made missing) because their class was below k; the figures above
	// are those after the suppression.
	Suppressed int64 `json:"suppressed_cases"`
	// Conflicts counts cases whose rows gave different values of an
	// attribute; each kept one set of them.
	Conflicts int64 `json:"conflicting_cases"`
}

// SizeCount is one bar of the class size distribution.
type SizeCount struct {
	Size    int64 `json:"size"`
	Classes int64 `json:"classes"`
	Cases   int64 `json:"cases"`
}

// Below counts what lies in classes smaller than the project's k.
type Below struct {
	Classes int64   `json:"classes"`
	Cases   int64   `json:"cases"`
	Share   float64 `json:"share"` // of all cases
}

// Risk is the prosecutor re-identification risk: for each case, 1 over
// the size of its class (the chance that an attacker who knows the case
// is in the data and knows its quasi-identifiers picks its record).
type Risk struct {
	Max        float64 `json:"max"`
	Mean       float64 `json:"mean"`
	CasesAtMax int64   `json:"cases_at_max"`
}

// Diversity is the distinct l-diversity of one sensitive attribute: the
// fewest distinct values it takes in any class (missing values not
// counted). A class where every case has the same value (l = 1) discloses
// it to anyone who can place a person in the class. For an event-level
// attribute (Level "event") a class's values are the distinct values any
// event of any of its cases carries.
type Diversity struct {
	Attribute   string `json:"attribute"`
	L           int64  `json:"l"`
	Homogeneous int64  `json:"homogeneous_classes"` // classes with one distinct value
	CasesInThem int64  `json:"homogeneous_cases"`   // their cases with a value
	// Level is "event" for an event-level attribute; absent for a case
	// attribute.
	Level string `json:"level,omitempty"`
}

// Combination is the k-anonymity of one subset of the quasi-identifiers.
type Combination struct {
	Attributes  []string `json:"attributes"`
	Classes     int64    `json:"classes"`
	Smallest    int64    `json:"smallest_class"`
	CasesBelowK int64    `json:"cases_below_k"`
}

// Analyzer computes a Report over cases given one at a time. Memory is
// bounded by Options.Memory: the class counts spill sorted runs to disk.
type Analyzer struct {
	opt   Options
	masks []uint64   // quasi-identifier subsets measured; the last is all of them
	subs  []*Counter // one per mask
	sens  []*Counter // one per sensitive attribute: class key + value
	cases int64
	key   []byte
}

// New returns an Analyzer.
func New(opt Options) *Analyzer {
	if opt.Memory <= 0 {
		opt.Memory = DefaultMemory
	}
	q := len(opt.Quasi)
	full := uint64(1)<<q - 1
	var masks []uint64
	if q <= maxFullSearch {
		for m := uint64(1); m < full; m++ {
			masks = append(masks, m)
		}
	} else {
		for i := range q {
			masks = append(masks, 1<<i, full&^(1<<i))
		}
	}
	masks = append(masks, full)
	a := &Analyzer{opt: opt, masks: masks}
	per := opt.Memory / (len(masks) + len(opt.Sensitive) + len(opt.EventSensitive))
	for range masks {
		a.subs = append(a.subs, NewCounter(opt.Dir, per))
	}
	for range len(opt.Sensitive) + len(opt.EventSensitive) {
		a.sens = append(a.sens, NewCounter(opt.Dir, per))
	}
	return a
}

// ClassKey is the key of the class of a case with these quasi-identifier
// values ("" is missing): the values joined by NUL, which no value holds.
func ClassKey(quasi []string) string { return strings.Join(quasi, "\x00") }

// Add takes one case: its quasi-identifier and sensitive values in the
// order of Options ("" is missing). With event-level sensitive attributes,
// use AddCase.
func (a *Analyzer) Add(quasi, sensitive []string) error { return a.AddCase(quasi, sensitive, nil) }

// AddCase takes one case: its quasi-identifier and sensitive values as Add
// does, and for each event-level sensitive attribute (Options order) the
// set of distinct non-empty values its events carry; events is nil or has
// one set per attribute. A value given twice in one set counts the case
// twice in the homogeneous cases.
func (a *Analyzer) AddCase(quasi, sensitive []string, events [][]string) error {
	if len(quasi) != len(a.opt.Quasi) || len(sensitive) != len(a.opt.Sensitive) {
		return fmt.Errorf("disclosure: %d quasi-identifiers and %d sensitive values, want %d and %d", len(quasi), len(sensitive), len(a.opt.Quasi), len(a.opt.Sensitive))
	}
	if events != nil && len(events) != len(a.opt.EventSensitive) {
		return fmt.Errorf("disclosure: %d event-level value sets, want %d", len(events), len(a.opt.EventSensitive))
	}
	a.cases++
	for i, m := range a.masks {
		a.key = a.key[:0]
		first := true
		for j, v := range quasi {
			if m&(1<<j) == 0 {
				continue
			}
			if !first {
				a.key = append(a.key, 0)
			}
			first = false
			a.key = append(a.key, v...)
		}
		if err := a.subs[i].Add(string(a.key), 1); err != nil {
			return err
		}
	}
	// a.key holds the full class key now (the last mask).
	for i, v := range sensitive {
		if v == "" {
			continue
		}
		k := append(a.key[:len(a.key):len(a.key)], 0)
		k = append(k, v...)
		if err := a.sens[i].Add(string(k), 1); err != nil {
			return err
		}
	}
	for i, set := range events {
		for _, v := range set {
			if v == "" {
				continue
			}
			k := append(a.key[:len(a.key):len(a.key)], 0)
			k = append(k, v...)
			if err := a.sens[len(a.opt.Sensitive)+i].Add(string(k), 1); err != nil {
				return err
			}
		}
	}
	return nil
}

// Report computes the report over the cases added.
func (a *Analyzer) Report() (*Report, error) {
	r := &Report{Cases: a.cases, K: a.opt.K, MaxRisk: a.opt.MaxRisk, Quasi: a.opt.Quasi, Sensitive: a.opt.Sensitive,
		Sizes: []SizeCount{}, Diversity: []Diversity{}, Combinations: []Combination{}}
	if r.Quasi == nil {
		r.Quasi = []string{}
	}
	if r.Sensitive == nil {
		r.Sensitive = []string{}
	}
	for i, m := range a.masks {
		c := Combination{Attributes: a.names(m)}
		sizes := map[int64]int64{}
		full := i == len(a.masks)-1
		err := a.subs[i].Each(func(_ string, n uint64) error {
			s := int64(n)
			c.Classes++
			if c.Smallest == 0 || s < c.Smallest {
				c.Smallest = s
			}
			if s < int64(a.opt.K) {
				c.CasesBelowK += s
			}
			if full {
				sizes[s]++
			}
			return nil
		})
		if err != nil {
			return nil, err
		}
		r.Combinations = append(r.Combinations, c)
		if !full {
			continue
		}
		r.Classes, r.Anonymity = c.Classes, c.Smallest
		for _, s := range slices.Sorted(mapKeys(sizes)) {
			n := sizes[s]
			r.Sizes = append(r.Sizes, SizeCount{Size: s, Classes: n, Cases: s * n})
			if s < int64(a.opt.K) {
				r.BelowK.Classes += n
				r.BelowK.Cases += s * n
			}
		}
	}
	if r.Cases > 0 {
		r.BelowK.Share = float64(r.BelowK.Cases) / float64(r.Cases)
		// Sum over cases of 1/size is the number of classes.
		r.Risk.Mean = float64(r.Classes) / float64(r.Cases)
		r.Risk.Max = 1 / float64(r.Anonymity)
		r.Risk.CasesAtMax = r.Sizes[0].Cases
	}
	for i, name := range a.opt.Sensitive {
		d, err := a.diversity(i, r.Classes)
		if err != nil {
			return nil, err
		}
		d.Attribute = name
		r.Diversity = append(r.Diversity, d)
	}
	for i, name := range a.opt.EventSensitive {
		d, err := a.diversity(len(a.opt.Sensitive)+i, r.Classes)
		if err != nil {
			return nil, err
		}
		d.Attribute, d.Level = name, "event"
		r.Diversity = append(r.Diversity, d)
		r.EventSensitive = append(r.EventSensitive, name)
	}
	// The driver: the fewest attributes whose classes are already as small
	// as those of all of them; ties go to more cases below k, then to the
	// first in the order measured.
	for i := range r.Combinations {
		c := &r.Combinations[i]
		if c.Smallest != r.Anonymity || r.Cases == 0 {
			continue
		}
		if d := r.Driver; d == nil || len(c.Attributes) < len(d.Attributes) ||
			len(c.Attributes) == len(d.Attributes) && c.CasesBelowK > d.CasesBelowK {
			r.Driver = c
		}
	}
	if r.Driver != nil {
		d := *r.Driver
		r.Driver = &d
	}
	r.AboveThreshold = r.Risk.Max > a.opt.MaxRisk
	return r, nil
}

func (a *Analyzer) diversity(i int, classes int64) (Diversity, error) {
	var d Diversity
	var seen int64 // classes with at least one value
	var cur string
	var distinct, cases int64
	have := false
	flush := func() {
		if !have {
			return
		}
		seen++
		if d.L == 0 || distinct < d.L {
			d.L = distinct
		}
		if distinct == 1 {
			d.Homogeneous++
			d.CasesInThem += cases
		}
	}
	err := a.sens[i].Each(func(k string, n uint64) error {
		cut := strings.LastIndexByte(k, 0)
		class := k[:cut]
		if !have || class != cur {
			flush()
			cur, have, distinct, cases = class, true, 0, 0
		}
		distinct++
		cases += int64(n)
		return nil
	})
	if err != nil {
		return d, err
	}
	flush()
	if seen < classes {
		d.L = 0 // some class has no value at all
	}
	return d, nil
}

// SmallClasses returns the keys (ClassKey) of the classes smaller than k;
// more than limit of them is an error naming the limit, so that the set
// stays bounded.
func (a *Analyzer) SmallClasses(limit int) (map[string]bool, error) {
	out := map[string]bool{}
	err := a.subs[len(a.subs)-1].Each(func(k string, n uint64) error {
		if int64(n) >= int64(a.opt.K) {
			return nil
		}
		if len(out) >= limit {
			return fmt.Errorf("disclosure: more than %d classes below k to suppress (the limit of suppression)", limit)
		}
		out[k] = true
		return nil
	})
	return out, err
}

func (a *Analyzer) names(m uint64) []string {
	out := make([]string, 0, bits.OnesCount64(m))
	for j, n := range a.opt.Quasi {
		if m&(1<<j) != 0 {
			out = append(out, n)
		}
	}
	return out
}

// Close removes the spilled runs.
func (a *Analyzer) Close() error {
	var errs []error
	for _, c := range a.subs {
		errs = append(errs, c.Close())
	}
	for _, c := range a.sens {
		errs = append(errs, c.Close())
	}
	return errors.Join(errs...)
}

func mapKeys(m map[int64]int64) func(func(int64) bool) {
	return func(yield func(int64) bool) {
		for k := range m {
			if !yield(k) {
				return
			}
		}
	}
}
