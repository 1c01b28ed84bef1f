package quality

import (
	"cmp"
	"encoding/json"
	"iter"
	"math"
	"math/big"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// ReportVersion is the version of the report's JSON format. Adding a
// finding code or an object member keeps the version; renaming or
// removing one, or changing a formula, bumps it.
//
// Version 3 holds each site's hourly series in runs (raw.hours.runs)
// rather than as one dense series from the first event. Version 4 counts
// Little's law by entries and exits (little.entries, little.exits and
// raw census entries, exits, stayed_seconds, recomputed by every per-case
// pass), completeness over the events a field applies to, and date-only
// resolution. Reports of versions 2 and 3 are still read and merged.
const ReportVersion = "4"

// Report is the quality report of one upload, or of several merged by
// [MergeReports]. Everything but Raw, Rows, Rejections and
// UnmappedColumns is derived from those by one function, so a merged
// report is computed exactly as a single one. Its JSON member names are
// stable (see SCORING.md); lists are never null.
//
// Scores run from 0 to 100 and are rounded to 0.1; a score is null when
// its dimension had nothing to measure.
type Report struct {
	Version    string           `json:"version"`
	Score      *float64         `json:"score"`
	Rows       Rows             `json:"rows"`
	Rejections []RejectionCount `json:"rejections"`
	Dimensions []Dimension      `json:"dimensions"`
	// Completeness is per field over all sites.
	Completeness []FieldCompleteness `json:"completeness"`
	EventTypes   []TypeCompleteness  `json:"event_types"`
	Stages       Stages              `json:"stages"`
	Cases        CaseFigures         `json:"cases"`
	Waits        []WaitCoverage      `json:"waits"`
	// WaitsFolded sums the pairs Waits does not list (Raw.WaitsFolded).
	WaitsFolded *FoldedCoverage   `json:"waits_folded,omitempty"`
	Resolution  Resolution        `json:"resolution"`
	Little      []LittleLaw       `json:"littles_law"`
	Currentness []SiteCurrentness `json:"currentness"`
	TimeRange   TimeRange         `json:"time_range"`
	Sites       Sites             `json:"sites"`
	PerSite     []SiteReport      `json:"per_site"`
	// Internal lists faults of the program rather than of the data (such
	// as order_breach); they do not enter any score.
	Internal []Finding `json:"internal"`
	// UnmappedColumns names the source columns the profile does not map;
	// ingest dropped them. The ingest sets it.
	UnmappedColumns []string `json:"unmapped_columns,omitempty"`
	// Raw holds the counts and sums everything else is derived from.
	Raw Raw `json:"raw"`
	// RowsOnly marks the report of an upload that judged no event (all
	// held already: a duplicate): it holds Version, Rows and Rejections
	// only, and its JSON has only those members and this one.
	RowsOnly bool `json:"rows_only,omitempty"`
}

// RowsOf returns a report of r's rows and rejections only (RowsOnly).
func RowsOf(r *Report) *Report {
	rej := r.Rejections
	if rej == nil {
		rej = []RejectionCount{}
	}
	return &Report{Version: r.Version, Rows: r.Rows, Rejections: rej, RowsOnly: true}
}

// MarshalJSON writes a RowsOnly report as its version, rows and
// rejections, and any other report member by member as declared.
func (r Report) MarshalJSON() ([]byte, error) {
	if r.RowsOnly {
		return json.Marshal(struct {
			Version    string           `json:"version"`
			RowsOnly   bool             `json:"rows_only"`
			Rows       Rows             `json:"rows"`
			Rejections []RejectionCount `json:"rejections"`
		}{r.Version, true, r.Rows, r.Rejections})
	}
	type plain Report // its fields and their tags, without this method
	return json.Marshal(plain(r))
}

// Rows counts the source rows.
type Rows struct {
	Total    int64 `json:"total"` // accepted + rejected
	Accepted int64 `json:"accepted"`
	Rejected int64 `json:"rejected"`
	// Held counts, in an upload's report, the file's valid rows not
	// judged here: events the version holds already and copies within
	// the file (the upload's events.already_held and events.copies). The
	// file had Total + Held rows. A version's report has none.
	Held int64 `json:"held,omitempty"`
	// Again counts, in a version's report, rejected rows of its files
	// that an earlier file of the version rejected too (the same source
	// text: a re-sent broken row). Each is counted once, in the file that
	// first held it; Total and Rejected leave these out (LessRepeats).
	Again int64 `json:"rejected_again,omitempty"`
}

// InFile is the count of the file's rows: judged, rejected, and held
// already or copies.
func (r Rows) InFile() int64 { return r.Total + r.Held }

// RejectionCount is how many rows were rejected for one reason.
type RejectionCount struct {
	Reason  schema.Reason `json:"reason"`
	Count   int64         `json:"count"`
	Samples []Sample      `json:"samples"`
}

// FieldCompleteness is how often a schema field holds a value among the
// accepted rows. Scored says whether it enters the completeness score.
type FieldCompleteness struct {
	Field    schema.Field `json:"field"`
	Required bool         `json:"required"`
	NonEmpty int64        `json:"non_empty"`
	Share    float64      `json:"share"` // NonEmpty / accepted rows; 0 when none
	// Applicable counts the events of the types the field applies to
	// (Applies) and ApplicableShare the share of them holding a value: what
	// the score and the empty_value finding judge.
	Applicable      int64   `json:"applicable"`
	ApplicableShare float64 `json:"applicable_share"`
	Scored          bool    `json:"scored"`
}

// TypeCompleteness is the completeness of the optional fields among the
// events of one type.
type TypeCompleteness struct {
	Type   schema.EventType `json:"event_type"`
	Events int64            `json:"events"`
	Fields []FieldShare     `json:"fields"`
}

// FieldShare is the share of events with a value for Field.
type FieldShare struct {
	Field schema.Field `json:"field"`
	Share float64      `json:"share"`
}

// Stages is the stage coverage: the share of cases with at least one
// event of each stage. A case is a case record (see SCORING.md).
type Stages struct {
	Cases     int64   `json:"cases"`
	Arrival   float64 `json:"arrival"`
	Start     float64 `json:"start"`
	Complete  float64 `json:"complete"`
	Departure float64 `json:"departure"`
}

// CaseFigures describe the cases: how many, their duration (first to last
// event, seconds) and their events. A case is its case id over every file
// of a version, however long it idles.
type CaseFigures struct {
	Count               int64   `json:"count"`
	MeanDurationSeconds float64 `json:"mean_duration_seconds"`
	MinDurationSeconds  float64 `json:"min_duration_seconds"`
	MaxDurationSeconds  float64 `json:"max_duration_seconds"`
	MeanEvents          float64 `json:"mean_events"`
	MinEvents           int64   `json:"min_events"`
	MaxEvents           int64   `json:"max_events"`
}

// WaitCoverage is, for one (queue, activity), how many waits there were
// and how many cannot be measured.
type WaitCoverage struct {
	Queue        string  `json:"queue"`
	Activity     string  `json:"activity"`
	Waits        int64   `json:"waits"`
	NoEnqueue    int64   `json:"no_enqueue"`
	NoStart      int64   `json:"no_start"`
	Unobservable float64 `json:"unobservable"` // (NoEnqueue + NoStart) / Waits
}

// FoldedCoverage is the wait coverage of the (queue, activity) pairs a
// report does not list: past the [ListedWaits] (and [ListedWaitBytes]
// of names) with the most waits, and past those the model tells apart.
type FoldedCoverage struct {
	Pairs        int64   `json:"pairs"`
	Waits        int64   `json:"waits"`
	NoEnqueue    int64   `json:"no_enqueue"`
	NoStart      int64   `json:"no_start"`
	Unobservable float64 `json:"unobservable"`         // (NoEnqueue + NoStart) / Waits
	MorePairs    bool    `json:"more_pairs,omitempty"` // FoldedWaits.MorePairs
}

// Resolution is the effective time resolution and the heaping on round
// times, over all accepted events, judged on the local wall clock.
type Resolution struct {
	Zone    string    `json:"zone"`
	Grid    string    `json:"grid"` // microsecond, millisecond, ..., day
	Heaping []Heaping `json:"heaping"`
	// DateOnly: every event sits at one clock time of day, in the zone or
	// in UTC: the data hold dates, not times. Grid is then day, Artefact
	// names the clock time and the fixed offset it shows when that is not
	// midnight, and hour-level gap checks are not made.
	DateOnly bool   `json:"date_only,omitempty"`
	Artefact string `json:"artefact,omitempty"`
}

// Heaping is the share of events on one round grid against the share
// expected at the effective resolution.
type Heaping struct {
	Grid     string  `json:"grid"`
	Events   int64   `json:"events"`
	Share    float64 `json:"share"`
	Expected float64 `json:"expected"`
	Heaped   bool    `json:"heaped"`
}

// LittleLaw compares, for one site, the time-average census L with λ·W,
// each side measured apart (SCORING.md): L from the census of entries and
// exits, a stay without an exit counted to the site's last event; λ·W
// from the entries and the stays, a stay without an exit ending at its
// case's last event. Rates are per hour, times in hours.
type LittleLaw struct {
	Site      string  `json:"site"`
	Judged    bool    `json:"judged"`
	Flagged   bool    `json:"flagged"`
	SpanHours float64 `json:"span_hours"`
	Entries   int64   `json:"entries"`
	Exits     int64   `json:"exits"`
	L         float64 `json:"l"`
	Lambda    float64 `json:"lambda"`
	W         float64 `json:"w"`
	LambdaW   float64 `json:"lambda_w"`
	Ratio     float64 `json:"ratio"` // L / (λ·W); 0 when λ·W is 0
}

// SiteCurrentness is the lag and the gaps of one site.
type SiteCurrentness struct {
	Site             string     `json:"site"`
	Newest           *time.Time `json:"newest"`
	LagMedianSeconds *int64     `json:"lag_median_seconds"`
	LagMaxSeconds    *int64     `json:"lag_max_seconds"`
	Stale            bool       `json:"stale"`
	GapHours         int64      `json:"gap_hours"`
	JudgedHours      int64      `json:"judged_hours"`
	GapDays          int64      `json:"gap_days"`
	JudgedDays       int64      `json:"judged_days"`
}

// TimeRange is the earliest and latest occurred_at among accepted rows;
// both are null when there were none.
type TimeRange struct {
	First *time.Time `json:"first"`
	Last  *time.Time `json:"last"`
}

// Sites counts events per site.
type Sites struct {
	Distinct int         `json:"distinct"`
	Other    int64       `json:"other"`  // events counted under OtherSite
	Counts   []SiteCount `json:"counts"` // by count, descending, then by site
}

// SiteCount is the number of accepted events of one site.
type SiteCount struct {
	Site  string `json:"site"`
	Count int64  `json:"count"`
}

// SiteReport is the score, the sub-scores and the per-field completeness
// of one site, for trends per site.
type SiteReport struct {
	Site         string           `json:"site"`
	Events       int64            `json:"events"`
	Score        *float64         `json:"score"`
	Dimensions   []DimensionScore `json:"dimensions"`
	Completeness []FieldShare     `json:"completeness"`
}

// DimensionScore is one sub-score.
type DimensionScore struct {
	Name  string   `json:"name"`
	Score *float64 `json:"score"`
}

// Dimension is one quality dimension: its score, its weight in the
// overall score, the number of rows it was measured over, and findings.
type Dimension struct {
	Name     string    `json:"name"`
	Score    *float64  `json:"score"`
	Weight   float64   `json:"weight"`
	Rows     int64     `json:"rows"`
	Findings []Finding `json:"findings"`
}

// Finding is one kind of problem found: how many, their share of Of (a
// stated population), where to look and why it matters. Informational
// findings do not enter the score. Only findings with a non-zero count
// are listed.
type Finding struct {
	Code          string       `json:"code"`
	Field         schema.Field `json:"field,omitempty"`
	Grid          string       `json:"grid,omitempty"`
	Count         int64        `json:"count"`
	Share         float64      `json:"share"`
	Of            string       `json:"of"`
	Informational bool         `json:"informational,omitempty"`
	Samples       []Sample     `json:"samples"`
	Why           string       `json:"why"`
}

// Sample locates one row of a finding: its source line and, for accepted
// rows, the case pseudonym; for rejected rows, the column and field at
// fault when known, what is wrong (Message) and the offending text of a
// non-identifier field (Text); for a gap, the site and the hour or day.
// It never holds an identifier's value.
type Sample struct {
	// File names the uploaded file the line is in (its name as uploaded),
	// set when the reports of a version's uploads are merged.
	File   string       `json:"file,omitempty"`
	Line   int64        `json:"line,omitempty"`
	CaseID string       `json:"case_id,omitempty"`
	Column string       `json:"column,omitempty"`
	Field  schema.Field `json:"field,omitempty"`
	Site   string       `json:"site,omitempty"`
	At     *time.Time   `json:"at,omitempty"`
	// Text is a rejected row's offending value as read (schema.Rejection's
	// Text: never an identifier's), Message what is wrong with it.
	Text    string `json:"text,omitempty"`
	Message string `json:"message,omitempty"`
}

// RejectedShare is the share of rows rejected among the file's (held ones
// included), 0 when there were no rows; a dataset's rejection threshold
// is compared against it.
func (r *Report) RejectedShare() float64 {
	return share(r.Rows.Rejected, r.Rows.InFile())
}

// Dimension returns the dimension named name, or nil.
func (r *Report) Dimension(name string) *Dimension {
	for i := range r.Dimensions {
		if r.Dimensions[i].Name == name {
			return &r.Dimensions[i]
		}
	}
	return nil
}

// Count returns the count of the finding with the given code, summed over
// fields and grids, 0 when absent.
func (r *Report) Count(code string) int64 {
	var n int64
	for _, f := range r.Findings() {
		if f.Code == code {
			n += f.Count
		}
	}
	for _, f := range r.Internal {
		if f.Code == code {
			n += f.Count
		}
	}
	return n
}

// Findings yields every finding of every dimension, in report order.
func (r *Report) Findings() iter.Seq2[*Dimension, *Finding] {
	return func(yield func(*Dimension, *Finding) bool) {
		for i := range r.Dimensions {
			d := &r.Dimensions[i]
			for j := range d.Findings {
				if !yield(d, &d.Findings[j]) {
					return
				}
			}
		}
	}
}

// Report computes the report from the counts so far. It does not change
// the accumulator, so it may be called again after more input.
func (a *Accumulator) Report() *Report {
	raw := Raw{Settings: a.settings(), Uploads: 1, Samples: map[string][]Sample{}, ResourcePeak: a.resPeak}
	for k, n := range a.capPeaks {
		p := CapacityPeak{Peak: n}
		if k.resource {
			p.Resource, p.Capacity = k.name, a.opt.Capacity.Resources[k.name]
		} else {
			p.Queue, p.Capacity = k.name, a.opt.Capacity.Queues[k.name]
		}
		raw.CapacityPeaks = append(raw.CapacityPeaks, p)
	}
	sortCapacityPeaks(raw.CapacityPeaks)
	var accepted int64
	for _, s := range a.sites {
		accepted += s.events
	}
	// The case in hand, if the per-case pass has not ended it: a wait
	// still pending was never started.
	pendingNoStart := make([]int64, len(a.sites))
	waitNoStart := make([]int64, len(a.waits)+1) // the last: waitBeyond
	if st := &a.cur; st.id != "" && st.flags&csWaitPending != 0 && st.wait > 0 {
		waitNoStart[min(st.wait-1, int32(len(a.waits)))]++
		pendingNoStart[st.site]++
	}
	for i, s := range a.sites {
		raw.Sites = append(raw.Sites, a.siteRaw(s, s.stages, pendingNoStart[i]))
	}
	for i, w := range a.waits {
		raw.Waits = append(raw.Waits, WaitRaw{Queue: w.key.queue, Activity: w.key.activity,
			Waits: w.waits, NoEnqueue: w.noEnqueue, NoStart: w.noStart + waitNoStart[i]})
	}
	slices.SortFunc(raw.Waits, func(x, y WaitRaw) int {
		return cmp.Or(cmp.Compare(x.Queue, y.Queue), cmp.Compare(x.Activity, y.Activity))
	})
	raw.Waits, raw.WaitsFolded = foldWaits(raw.Waits, nil)
	if b := a.waitsBeyond; b.waits > 0 {
		raw.WaitsFolded = raw.WaitsFolded.add(&FoldedWaits{Waits: b.waits, NoEnqueue: b.noEnqueue,
			NoStart: b.noStart + waitNoStart[len(a.waits)], MorePairs: true})
	}
	for c := range numCodes {
		if len(a.samples[c]) > 0 {
			raw.Samples[codeNames[c]] = slices.Clone(a.samples[c])
		}
	}
	for i, f := range schema.Fields {
		if len(a.emptySamples[i]) > 0 {
			raw.Samples[emptyKey(f)] = slices.Clone(a.emptySamples[i])
		}
	}
	rej := []RejectionCount{}
	for _, reason := range sortedKeys(a.reasons) {
		f := a.reasons[reason]
		rej = append(rej, RejectionCount{Reason: reason, Count: f.n, Samples: slices.Clone(f.samples)})
	}
	rows := Rows{Total: accepted + a.rejected, Accepted: accepted, Rejected: a.rejected}
	return derive(rows, rej, raw, nil)
}

func emptyKey(f schema.Field) string { return CodeEmptyValue + ":" + string(f) }

func (a *Accumulator) settings() Settings {
	o := &a.opt
	st := Settings{
		Zone: o.Zone.String(), MappedFields: slices.Clone(o.MappedFields), MaxSamples: o.MaxSamples,
		ResourceCapacity: o.ResourceCapacity, Capacity: o.Capacity, MaxCaseSeconds: o.MaxCase.Seconds(),
		MaxServiceSeconds: float64(a.maxService) / 1e6, ClockToleranceSeconds: o.ClockTolerance.Seconds(),
		EventIDWindowSeconds: o.EventIDWindow.Seconds(),
		LittleTolerance:      o.LittleTolerance, GapMinMean: o.GapMinMean, GapMinWeeks: o.GapMinWeeks,
		StaleAfterSeconds: o.StaleAfter.Seconds(),
		UploadedAt:        timePtr(o.UploadedAt), WindowFrom: timePtr(o.WindowFrom), WindowTo: timePtr(o.WindowTo),
		Historical: o.Historical,
	}
	if st.MappedFields == nil {
		st.MappedFields = []schema.Field{}
	}
	if b := a.ids.bound; b.hit {
		st.EventIDBound = &EventIDBound{Slots: tableShards * a.ids.maxShard, From: time.UnixMicro(a.base + int64(b.from)).UTC(),
			LookbackSeconds: float64(b.lookback) / 1e6, Dropped: b.dropped}
	}
	return st
}

func (a *Accumulator) siteRaw(s *siteAcc, stages stageCounts, pendingNoStart int64) SiteRaw {
	r := SiteRaw{
		Site: s.name, Events: s.events, Counts: map[string]int64{},
		AccuracyRows: s.accRows, ConsistencyRows: s.conRows, UniquenessRows: s.uniRows,
		NonEmpty: map[schema.Field]int64{}, ByType: map[schema.EventType]TypeRaw{}, Grid: map[string]int64{},
		Stages:   StageRaw{Cases: stages.cases, Arrival: stages.arrival, Start: stages.start, Complete: stages.complete, Departure: stages.departure},
		FileRows: s.fileRows, FileBackSteps: s.fileJumps,
		Cases: s.cases.raw(),
	}
	for c := range numCodes {
		if n := s.n[c]; n > 0 {
			r.Counts[codeNames[c]] = n
		}
	}
	if pendingNoStart > 0 {
		r.Counts[CodeWaitNoStart] += pendingNoStart
	}
	for i, f := range schema.Fields {
		r.NonEmpty[f] = s.nonEmpty[i]
	}
	for ti, t := range schema.EventTypes {
		if s.byType[ti] == 0 {
			continue
		}
		tr := TypeRaw{Events: s.byType[ti], NonEmpty: map[schema.Field]int64{}}
		for i, f := range schema.Fields {
			tr.NonEmpty[f] = s.typeNonEmpty[ti][i]
		}
		r.ByType[t] = tr
	}
	for g := range numGrids {
		r.Grid[gridNames[g]] = s.grid[g]
	}
	if s.clock != nil {
		c := *s.clock
		r.Clock = &c
	}
	if s.hasAt {
		r.First, r.Last = timePtr(time.UnixMicro(s.firstAt)), timePtr(time.UnixMicro(s.lastAt))
		// Cases still in the system stay in the census to the site's last
		// event.
		// The sums are exact integers (µs); each is rounded once, here.
		area := s.area.big()
		area.Add(area, new(big.Int).Mul(big.NewInt(s.openN), big.NewInt(s.lastAt+instantShift)))
		area.Sub(area, s.openEntry.big())
		stayed := s.stayed.big()
		if st := &a.cur; st.id != "" && st.flags&csInSystem != 0 && st.site == s.idx {
			area.Add(area, big.NewInt(s.lastAt-st.entry))
			stayed.Add(stayed, big.NewInt(st.rec-st.entry))
		}
		r.Census = CensusRaw{
			SpanSeconds: float64(s.lastAt-s.firstAt) / 1e6, AreaCaseSeconds: microsToSeconds(area),
			Entries: s.entries, Exits: s.exits, StayedSeconds: microsToSeconds(stayed),
		}
	}
	r.Lag = LagRaw{N: s.lagN, MaxSeconds: s.lagMax, Buckets: map[int]int64{}}
	for b, n := range s.lag {
		if n > 0 {
			r.Lag.Buckets[b] = n
		}
	}
	r.Hours = s.hours.series()
	return r
}

func sortedKeys[K cmp.Ordered, V any](m map[K]V) []K {
	ks := make([]K, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	slices.Sort(ks)
	return ks
}

func share(n, of int64) float64 {
	if of <= 0 {
		return 0
	}
	return float64(n) / float64(of)
}

func round1(x float64) float64 { return math.Round(x*10) / 10 }

func ptr(x float64) *float64 { return &x }

func timePtr(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	u := t.UTC()
	return &u
}
