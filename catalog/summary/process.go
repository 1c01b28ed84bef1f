package summary

import (
	"cmp"
	"slices"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// Caps of the process views: beyond them keys are counted together
// (OtherFollows, OtherVariants, OtherWorkload, OtherHandovers), so memory
// is bounded whatever the version holds. The keys told apart are those of
// lowest rank (a fixed hash of the key, then the key), not the first met:
// so which keys they are does not depend on the order cases were
// observed, and merged observers equal one pass (see ProcessObserver).
const (
	MaxFollows    = 10000  // directly-follows pairs told apart
	MaxVariants   = 10000  // trace variants told apart
	MaxWorkload   = 100000 // (resource, day) cells told apart
	MaxHandovers  = 10000  // resource pairs told apart
	TopVariants   = 20     // variants listed
	variantJoiner = "\x00"
)

// Process holds the process views of a version: what researchers of
// service processes ask first. It is computed in the one per-case pass
// (a [cases.Observer]: every event of a case, in the case's order, see
// cases.Less), over the events the summary keeps, so its counts are exact
// up to the caps. Per-activity counts and service durations are the
// summary's `activities`.
type Process struct {
	// DirectlyFollows are the pairs of steps one after the other in a
	// case, most frequent first, with the time between them. A step is an
	// activity instance (cases.Steps): a complete event, or a start with
	// its complete; events without an activity are skipped.
	DirectlyFollows []Follows `json:"directly_follows"`
	OtherFollows    uint64    `json:"other_follows"` // pairs beyond MaxFollows
	// Variants are the most frequent traces (the case's sequence of
	// steps), at most TopVariants, with their cases and share of all
	// cases.
	Variants        []Variant `json:"variants"`
	DistinctVariant uint64    `json:"distinct_variants"` // up to MaxVariants
	OtherVariants   uint64    `json:"other_variants"`    // cases of variants beyond MaxVariants
	// Workload counts events per resource per local day; Handovers the
	// consecutive events of a case at two different resources.
	Workload       []Workload `json:"workload"`
	OtherWorkload  uint64     `json:"other_workload"`
	Handovers      []Handover `json:"handovers"`
	OtherHandovers uint64     `json:"other_handovers"`
}

// Follows is one directly-follows pair.
type Follows struct {
	From  string `json:"from"`
	To    string `json:"to"`
	Count uint64 `json:"count"`
	// Time between the two events, seconds: median and p90 (Hyndman-Fan
	// type 7; exact up to ExactValues distinct values, see Durations).
	P50   float64 `json:"p50"`
	P90   float64 `json:"p90"`
	Exact bool    `json:"exact"`
}

// Variant is one trace variant.
type Variant struct {
	Activities []string `json:"activities"`
	Cases      uint64   `json:"cases"`
	Share      float64  `json:"share"`
}

// Workload is the events of one resource on one local day.
type Workload struct {
	Resource string `json:"resource"`
	Date     string `json:"date"` // YYYY-MM-DD, local
	Events   uint64 `json:"events"`
}

// Handover counts a case passing from one resource to another.
type Handover struct {
	From  string `json:"from"`
	To    string `json:"to"`
	Count uint64 `json:"count"`
}

// The caps in force; tests lower them.
var (
	maxFollows   = MaxFollows
	maxVariants  = MaxVariants
	maxWorkload  = MaxWorkload
	maxHandovers = MaxHandovers
	// The bytes of activity names the directly-follows pairs and the
	// variants kept may hold (long free text mapped to activity fills a
	// view by bytes first): far above what real activity names reach.
	maxFollowBytes  = 2 << 20
	maxVariantBytes = 8 << 20
)

// ProcessObserver computes [Process] in the per-case pass. Its state is
// counts by key (the directly-follows pairs with their gaps, the variants,
// the (resource, day) cells, the handovers) and the counts beyond the
// caps, all of which add: the observers of disjoint sets of cases merge
// into what one pass over their union gives, exactly, whichever caps are
// reached (the keys kept are the lowest of rank in the union, with all
// their counts, and the rest is "other"). An observer bound to an
// accumulator ([Accumulator.Process]) is part of its state: encoded,
// decoded and merged with it.
type ProcessObserver struct {
	a *Accumulator // for the zone and the exact-values cap

	follows   map[[2]string]*dist
	followsN  map[[2]string]uint64
	otherF    uint64
	variants  map[string]uint64
	otherV    uint64
	cases     uint64
	work      map[workKey]uint64
	otherW    uint64
	hand      map[[2]string]uint64
	otherH    uint64
	seq       []string    // steps of the case in hand (cases.Steps)
	steps     cases.Steps // which of its events are steps
	lastAct   string
	lastActAt int64
	hasAct    bool
	lastRes   string
	// The highest rank kept by the last trim of each map, once trimmed:
	// a new key of higher rank is never told apart.
	thrF, thrV, thrW, thrH *keyRank
	// The bytes of the keys of follows and variants, as far as known
	// since the last trim: a trim is due past twice the budget.
	bytesF, bytesV int
}

type workKey struct {
	res string
	day int32
}

// NewProcess returns a process observer whose days are local in a's zone.
func (a *Accumulator) NewProcess() *ProcessObserver {
	return &ProcessObserver{a: a, follows: map[[2]string]*dist{}, followsN: map[[2]string]uint64{},
		variants: map[string]uint64{}, work: map[workKey]uint64{}, hand: map[[2]string]uint64{}}
}

// Event is part of [cases.Observer].
func (p *ProcessObserver) Event(e *schema.Event) {
	at := e.OccurredAt.UnixMicro()
	if p.steps.Step(e) {
		if p.hasAct {
			k := [2]string{p.lastAct, e.Activity}
			d := p.follows[k]
			if d == nil && !above(p.thrF, pairRank(k)) {
				k = [2]string{strings.Clone(k[0]), strings.Clone(k[1])}
				d = newDist()
				p.follows[k] = d
				if p.bytesF += pairBytes(k); len(p.follows) > 2*maxFollows || p.bytesF > 2*maxFollowBytes {
					p.trimFollows()
				}
				d = p.follows[k]
			}
			if d == nil {
				p.otherF++
			} else {
				p.followsN[k]++
				if g := at - p.lastActAt; g >= 0 {
					d.add(g, p.a.cap)
				}
			}
		}
		if p.lastAct != e.Activity {
			p.lastAct = strings.Clone(e.Activity)
		}
		p.lastActAt, p.hasAct = at, true
		p.seq = append(p.seq, p.lastAct)
	}
	if e.ResourceID != "" {
		_, day := p.a.local(at)
		k := workKey{e.ResourceID, day}
		if _, ok := p.work[k]; ok || !above(p.thrW, workRank(k)) {
			if !ok {
				k.res = strings.Clone(k.res)
			}
			p.work[k]++
			if len(p.work) > 2*maxWorkload {
				p.otherW += trimCount(p.work, maxWorkload, workRank, &p.thrW)
			}
		} else {
			p.otherW++
		}
		if p.lastRes != "" && p.lastRes != e.ResourceID {
			h := [2]string{p.lastRes, e.ResourceID}
			if _, ok := p.hand[h]; ok || !above(p.thrH, pairRank(h)) {
				if !ok {
					h[1] = strings.Clone(h[1])
				}
				p.hand[h]++
				if len(p.hand) > 2*maxHandovers {
					p.otherH += trimCount(p.hand, maxHandovers, pairRank, &p.thrH)
				}
			} else {
				p.otherH++
			}
		}
		if p.lastRes != e.ResourceID {
			p.lastRes = strings.Clone(e.ResourceID)
		}
	}
}

// Wait is part of [cases.Observer].
func (p *ProcessObserver) Wait(*cases.Wait) {}

// Service is part of [cases.Observer].
func (p *ProcessObserver) Service(*cases.Service) {}

// Case is part of [cases.Observer]: it counts the case's variant.
func (p *ProcessObserver) Case(*cases.Record) {
	p.cases++
	k := strings.Join(p.seq, variantJoiner)
	if n, ok := p.variants[k]; ok || !above(p.thrV, stringRank(k)) {
		p.variants[k] = n + 1
		if !ok {
			p.bytesV += len(k)
		}
		if len(p.variants) > 2*maxVariants || p.bytesV > 2*maxVariantBytes {
			p.trimVariants()
		}
	} else {
		p.otherV++
	}
	p.seq = p.seq[:0]
	p.steps.Reset()
	p.hasAct, p.lastAct, p.lastRes = false, "", ""
}

// Result returns the process views.
func (p *ProcessObserver) Result() *Process {
	p.normalize()
	out := &Process{DirectlyFollows: []Follows{}, Variants: []Variant{}, Workload: []Workload{}, Handovers: []Handover{},
		OtherFollows: p.otherF, OtherVariants: p.otherV, OtherWorkload: p.otherW, OtherHandovers: p.otherH,
		DistinctVariant: uint64(len(p.variants))}
	for k, d := range p.follows {
		du := durationsOf(d)
		out.DirectlyFollows = append(out.DirectlyFollows, Follows{From: k[0], To: k[1], Count: p.followsN[k], P50: du.P50, P90: du.P90, Exact: du.Exact})
	}
	slices.SortFunc(out.DirectlyFollows, func(x, y Follows) int {
		return cmp.Or(cmp.Compare(y.Count, x.Count), cmp.Compare(x.From, y.From), cmp.Compare(x.To, y.To))
	})
	type vc struct {
		k string
		n uint64
	}
	vs := make([]vc, 0, len(p.variants))
	for k, n := range p.variants {
		vs = append(vs, vc{k, n})
	}
	slices.SortFunc(vs, func(x, y vc) int { return cmp.Or(cmp.Compare(y.n, x.n), cmp.Compare(x.k, y.k)) })
	for _, v := range vs[:min(len(vs), TopVariants)] {
		acts := []string{}
		if v.k != "" {
			acts = strings.Split(v.k, variantJoiner)
		}
		out.Variants = append(out.Variants, Variant{Activities: acts, Cases: v.n, Share: float64(v.n) / float64(p.cases)})
	}
	for k, n := range p.work {
		out.Workload = append(out.Workload, Workload{Resource: k.res, Date: time.Unix(int64(k.day)*86400, 0).UTC().Format("2006-01-02"), Events: n})
	}
	slices.SortFunc(out.Workload, func(x, y Workload) int {
		return cmp.Or(cmp.Compare(x.Resource, y.Resource), cmp.Compare(x.Date, y.Date))
	})
	for k, n := range p.hand {
		out.Handovers = append(out.Handovers, Handover{From: k[0], To: k[1], Count: n})
	}
	slices.SortFunc(out.Handovers, func(x, y Handover) int {
		return cmp.Or(cmp.Compare(y.Count, x.Count), cmp.Compare(x.From, y.From), cmp.Compare(x.To, y.To))
	})
	return out
}
